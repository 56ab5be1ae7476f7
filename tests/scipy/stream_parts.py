#!/usr/bin/python3
"""Test data and outside reference for tests/data/stream_parts/stream_parts.mnd.

Writes, into the folder given (default: tests/data/stream_parts):
- stream_parts.npz: the weights, seeded NumPy normal draws (numpy.random.default_rng(10)),
  f3's weight less 0.8 I (a decaying field);
- inputs.csv: a sequence file of three sequences, gaps drawn uniformly from 0.05 to 3
  (and one repeated time stamp's worth of gap 0 avoided: every gap is above 0);
- expected.csv: the outputs of an independent forward pass per observation:
  over each gap the state follows dh/dt = f(h, t), solved with SciPy's solve_ivp
  method RK45 at the description's rtol 1e-4 and atol 1e-6 (SciPy's RK45 takes the
  steps of meander's dormand-prince rules, DEVELOPERS.md "Integrator semantics");
  the GRU update after the PyTorch GRUCell documentation's formula; the readout's
  residual block; the continuous block `settle` by the classical Runge-Kutta
  formula, 3 steps over [0, 1], written out here; the dense head.
"""
import argparse
import os

import numpy as np
from scipy.integrate import solve_ivp

HERE = os.path.dirname(os.path.abspath(__file__))


def sigmoid(v):
    return 1.0 / (1.0 + np.exp(-v))


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=os.path.join(HERE, "..", "data", "stream_parts"))
    args = ap.parse_args()
    rng = np.random.default_rng(10)
    S, X = 4, 2

    def layer(out, inp, scale=0.6):
        return rng.normal(scale=scale, size=(out, inp)), rng.normal(scale=0.2, size=out)

    w = {
        "f1": layer(8, S + 1, 0.8),   # time is the last column
        "f2": layer(S, 8, 0.5),
        "f3": layer(S, S, 0.35),
        "r1": layer(6, S),
        "r2": layer(S, 6),
        "s1": layer(S, S),
        "head": layer(2, S),
    }
    gru = {
        "cell.weight_ih": rng.normal(scale=0.5, size=(3 * S, X)),
        "cell.weight_hh": rng.normal(scale=0.5, size=(3 * S, S)),
        "cell.bias_ih": rng.normal(scale=0.2, size=3 * S),
        "cell.bias_hh": rng.normal(scale=0.2, size=3 * S),
    }
    # A decaying field: f3's weight is -0.8 I plus its draws, so the state stays bounded over long gaps.
    w["f3"] = (w["f3"][0] - 0.8 * np.eye(S), w["f3"][1])
    arrays = {}
    for name, (wt, b) in w.items():
        arrays[name + ".weight"] = wt
        arrays[name + ".bias"] = b
    arrays.update(gru)
    os.makedirs(args.out, exist_ok=True)
    np.savez(os.path.join(args.out, "stream_parts.npz"), **arrays)

    def dense(name, x):
        return w[name][0] @ x + w[name][1]

    def field(t, h):
        inner = h + dense("f2", np.tanh(dense("f1", np.append(h, t))))
        return dense("f3", inner)

    def settle(y):
        f = lambda v: np.tanh(dense("s1", v))
        h = 1.0 / 3
        for _ in range(3):
            k1 = f(y)
            k2 = f(y + h / 2 * k1)
            k3 = f(y + h / 2 * k2)
            k4 = f(y + h * k3)
            y = y + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        return y

    def gru_update(x, h):
        gi = gru["cell.weight_ih"] @ x + gru["cell.bias_ih"]
        gh = gru["cell.weight_hh"] @ h + gru["cell.bias_hh"]
        r = sigmoid(gi[:S] + gh[:S])
        z = sigmoid(gi[S:2 * S] + gh[S:2 * S])
        n = np.tanh(gi[2 * S:] + r * gh[2 * S:])
        return (1 - z) * n + z * h

    inputs = ["sequence,time,x0,x1"]
    expected = ["y0,y1"]
    for seq, n in (("a", 8), ("b", 6), ("c", 6)):
        times = np.round(np.cumsum(rng.uniform(0.05, 3.0, size=n)), 6)
        h = np.zeros(S)
        for i, t in enumerate(times):
            gap = 0.0 if i == 0 else float(t - times[i - 1])
            if gap > 0:
                sol = solve_ivp(field, (0.0, gap), h, method="RK45", rtol=1e-4, atol=1e-6)
                assert sol.success
                h = sol.y[:, -1]
            x = np.round(rng.normal(size=X), 4)
            h = gru_update(x, h)
            r = h + dense("r2", np.tanh(dense("r1", h)))
            y = dense("head", settle(r))
            inputs.append(f"{seq},{t!r},{x[0]!r},{x[1]!r}")
            expected.append(",".join(repr(float(v)) for v in y))
    with open(os.path.join(args.out, "inputs.csv"), "w") as f:
        f.write("\n".join(inputs) + "\n")
    with open(os.path.join(args.out, "expected.csv"), "w") as f:
        f.write("\n".join(expected) + "\n")


if __name__ == "__main__":
    main()
