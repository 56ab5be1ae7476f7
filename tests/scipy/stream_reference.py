#!/usr/bin/python3
"""Outside references for streaming models (tests/unit/stream_reference.cpp).

- gru:    PyTorch's nn.GRUCell in float64 (the tensor names and gate order
          meander's `gated` layer binds).
- blend:  the closed-form continuous-time cell of Hasani et al., Nature Machine
          Intelligence 2022, eq. (10): x(t) = sigmoid(-f t) * g + (1 - sigmoid(-f t)) * h,
          written out in NumPy.
- odernn: a whole ODE-RNN sequence (Rubanova et al. 2019): over each gap the
          state follows dh/dt = f(h), solved with SciPy's solve_ivp (DOP853,
          rtol = atol = 1e-12); then a GRU update written out in NumPy after
          the PyTorch documentation's formula; then a dense readout.

Writes one JSON document (--out); the committed copy is
tests/data/stream_reference.json. Without torch the gru part is left out.
"""
import argparse
import json

import numpy as np
import scipy
from scipy.integrate import solve_ivp


def sigmoid(v):
    return 1.0 / (1.0 + np.exp(-v))


def gru_numpy(w_ih, w_hh, b_ih, b_hh, x, h):
    # PyTorch GRUCell documentation: gates r, z, n in that order along dim 0.
    gi = w_ih @ x + b_ih
    gh = w_hh @ h + b_hh
    n_h = h.size
    r = sigmoid(gi[:n_h] + gh[:n_h])
    z = sigmoid(gi[n_h:2 * n_h] + gh[n_h:2 * n_h])
    n = np.tanh(gi[2 * n_h:] + r * gh[2 * n_h:])
    return (1 - z) * n + z * h


def gru_part(rng):
    import torch
    torch.manual_seed(7)
    cell = torch.nn.GRUCell(3, 5).double()
    cases = []
    for _ in range(4):
        x = torch.tensor(rng.normal(size=(1, 3)))
        h = torch.tensor(rng.normal(size=(1, 5)))
        with torch.no_grad():
            out = cell(x, h)
        cases.append({"x": x[0].tolist(), "h": h[0].tolist(), "h_next": out[0].tolist()})
    sd = {k: v.detach().numpy() for k, v in cell.state_dict().items()}
    return {
        "source": f"torch.nn.GRUCell, PyTorch {torch.__version__}, float64",
        "tensors": {k: {"shape": list(v.shape), "values": v.ravel().tolist()} for k, v in sd.items()},
        "cases": cases,
    }


def blend_part(rng):
    width, hidden = 4, 8
    w = {
        "b1": (rng.normal(scale=0.6, size=(hidden, width)), rng.normal(scale=0.2, size=hidden)),
        "rate": (rng.normal(scale=0.6, size=(width, hidden)), rng.normal(scale=0.2, size=width)),
        "start": (rng.normal(scale=0.6, size=(width, hidden)), rng.normal(scale=0.2, size=width)),
        "end": (rng.normal(scale=0.6, size=(width, hidden)), rng.normal(scale=0.2, size=width)),
    }
    cases = []
    for gap in [0.0, 0.05, 0.7, 3.0]:
        x = rng.normal(size=width)
        b = np.tanh(w["b1"][0] @ x + w["b1"][1])
        f = w["rate"][0] @ b + w["rate"][1]
        g = np.tanh(w["start"][0] @ b + w["start"][1])
        hh = np.tanh(w["end"][0] @ b + w["end"][1])
        s = sigmoid(-f * gap)
        cases.append({"gap": gap, "h": x.tolist(), "h_next": (s * g + (1 - s) * hh).tolist()})
    return {
        "source": f"Hasani et al. 2022 eq. (10) in NumPy {np.__version__}",
        "tensors": tensors(w),
        "cases": cases,
    }


def tensors(w):
    out = {}
    for name, (wt, b) in w.items():
        out[name + ".weight"] = {"shape": list(wt.shape), "values": wt.ravel().tolist()}
        out[name + ".bias"] = {"shape": list(b.shape), "values": b.ravel().tolist()}
    return out


def odernn_part(rng):
    state, obs, hidden, outs = 4, 3, 8, 2
    w = {
        "f1": (rng.normal(scale=0.7, size=(hidden, state)), rng.normal(scale=0.2, size=hidden)),
        "f2": (rng.normal(scale=0.7, size=(state, hidden)), rng.normal(scale=0.2, size=state)),
        "head": (rng.normal(scale=0.7, size=(outs, state)), rng.normal(scale=0.2, size=outs)),
    }
    gru = {
        "cell.weight_ih": rng.normal(scale=0.5, size=(3 * state, obs)),
        "cell.weight_hh": rng.normal(scale=0.5, size=(3 * state, state)),
        "cell.bias_ih": rng.normal(scale=0.2, size=3 * state),
        "cell.bias_hh": rng.normal(scale=0.2, size=3 * state),
    }

    def field(_t, h):
        return w["f2"][0] @ np.tanh(w["f1"][0] @ h + w["f1"][1]) + w["f2"][1]

    rows = []
    for seq, n in (("a", 6), ("b", 5)):
        times = np.cumsum(rng.uniform(0.05, 2.0, size=n))
        h = np.zeros(state)
        for i, t in enumerate(times):
            gap = 0.0 if i == 0 else float(t - times[i - 1])
            if gap > 0:
                sol = solve_ivp(field, (0.0, gap), h, method="DOP853", rtol=1e-12, atol=1e-12)
                h = sol.y[:, -1]
            x = rng.normal(size=obs)
            h = gru_numpy(gru["cell.weight_ih"], gru["cell.weight_hh"], gru["cell.bias_ih"], gru["cell.bias_hh"], x, h)
            y = w["head"][0] @ h + w["head"][1]
            rows.append({"sequence": seq, "time": float(t), "gap": gap, "x": x.tolist(), "y": y.tolist()})
    t = tensors(w)
    for k, v in gru.items():
        t[k] = {"shape": list(v.shape), "values": v.ravel().tolist()}
    return {
        "source": f"SciPy {scipy.__version__} solve_ivp DOP853 rtol=atol=1e-12 over each gap, GRU and readout in NumPy",
        "tensors": t,
        "rows": rows,
    }


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", required=True)
    args = ap.parse_args()
    doc = {}
    try:
        doc["gru"] = gru_part(np.random.default_rng(1))
    except ImportError:
        pass
    doc["blend"] = blend_part(np.random.default_rng(2))
    doc["odernn"] = odernn_part(np.random.default_rng(3))
    with open(args.out, "w") as f:
        json.dump(doc, f, indent=1)


if __name__ == "__main__":
    main()
