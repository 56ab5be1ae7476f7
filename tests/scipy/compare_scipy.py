#!/usr/bin/python3
"""Reference runs of SciPy's solve_ivp on a small neural field, for
tests/unit/scipy_agreement.cpp.

The field is the one a meander continuous block computes:
    f1 = tanh(W1 [h; t] + b1)        (time joins the input as its last column)
    f2 = softplus(W2 f1 + b2)        (softplus written as max(x,0) + log1p(exp(-|x|)),
                                      the runtime's form)
    dh/dt = W3 f2 + b3
Elementwise functions go through Python's math module, i.e. the C library's
libm that the C++ side calls too: NumPy's SIMD tanh/exp/log1p differ from it
in the last bit for about a third of all arguments, and the error estimate of
an embedded pair cancels ~7 digits, so such bits would move step sizes by
~1e-10 relative.
Weights come from a fixed seed. For every run the script records SciPy's
initial step, every accepted step (t at its start, signed h), nfev and the
final state; the weights go into the file too, so the C++ test rebuilds the
same field without NumPy.

Run with Debian's Python, which sees SciPy 1.10:
    /usr/bin/python3 tests/scipy/compare_scipy.py [--out tests/data/scipy_reference.json]
The output is deterministic: same NumPy/SciPy, same bytes.
"""

import argparse
import json
import math
import os
import sys

import numpy as np
import scipy
from scipy.integrate import DOP853, RK23, RK45, solve_ivp
from scipy.integrate._ivp.common import select_initial_step

SEED = 20261201
STATE = 3
HIDDEN1 = 8
HIDDEN2 = 6

SOLVERS = {"RK45": RK45, "RK23": RK23, "DOP853": DOP853}

# (method, t0, t1, rtol, atol, first_step)
RUNS = [
    ("RK45", 0.0, 2.0, 1e-3, 1e-6, None),
    ("RK45", 0.0, 2.0, 1e-6, 1e-9, None),
    ("RK45", 0.0, 2.0, 1e-9, 1e-11, None),
    ("RK45", 0.0, 6.0, 1e-8, 1e-10, None),
    ("RK45", 2.0, 0.0, 1e-6, 1e-9, None),     # backwards in time
    ("RK45", 0.0, 2.0, 1e-5, 1e-8, 0.05),     # a given first step
    ("RK23", 0.0, 2.0, 1e-3, 1e-6, None),
    ("RK23", 0.0, 2.0, 1e-6, 1e-9, None),
    ("RK23", 2.0, 0.0, 1e-4, 1e-7, None),
    ("DOP853", 0.0, 2.0, 1e-13, 1e-13, None),
]


def make_layers():
    rng = np.random.default_rng(SEED)

    def layer(name, n_in, time_input, n_out, activation, gain):
        cols = n_in + (1 if time_input else 0)
        w = rng.standard_normal((n_out, cols)) * (gain / np.sqrt(cols))
        b = rng.standard_normal(n_out) * 0.3
        return {"name": name, "in": n_in, "time_input": time_input, "out": n_out,
                "activation": activation, "weight": w, "bias": b}

    return [
        layer("f1", STATE, True, HIDDEN1, "tanh", 1.6),
        layer("f2", HIDDEN1, False, HIDDEN2, "softplus", 1.2),
        layer("f3", HIDDEN2, False, STATE, "identity", 1.0),
    ]


def elementwise(fn):
    return lambda x: np.array([fn(float(v)) for v in x])


def softplus(v):
    return max(v, 0.0) + math.log1p(math.exp(-abs(v)))


ACTIVATIONS = {"tanh": elementwise(math.tanh), "softplus": elementwise(softplus), "identity": lambda x: x}


def make_field(layers):
    def field(t, h):
        x = h
        for lay in layers:
            if lay["time_input"]:
                x = np.concatenate([x, [t]])
            x = ACTIVATIONS[lay["activation"]](lay["weight"] @ x + lay["bias"])
        return x
    return field


def run(field, y0, method, t0, t1, rtol, atol, first_step):
    cls = SOLVERS[method]
    opts = {"rtol": rtol, "atol": atol}
    if first_step is not None:
        opts["first_step"] = first_step
    solver = cls(field, t0, y0, t1, **opts)
    initial = float(solver.h_abs)
    if first_step is None:
        # The solver's own choice must be HNW I, II.4 as SciPy's helper computes it.
        f0 = field(t0, y0)
        again = select_initial_step(field, t0, y0, f0, solver.direction,
                                    solver.error_estimator_order, rtol, atol)
        assert again == initial, (again, initial)
    steps = []
    while solver.status == "running":
        message = solver.step()
        if solver.status == "failed":
            raise RuntimeError(f"{method} failed: {message}")
        steps.append([float(solver.t_old), float(solver.t - solver.t_old)])
    # solve_ivp drives the same solver object: same nfev and final state.
    sol = solve_ivp(field, (t0, t1), y0, method=method, **opts)
    assert sol.status == 0 and sol.nfev == solver.nfev, (sol.status, sol.nfev, solver.nfev)
    assert np.array_equal(sol.y[:, -1], solver.y)
    record = {"method": method, "t0": t0, "t1": t1, "rtol": rtol, "atol": atol,
              "first_step": first_step, "initial_step": initial,
              "accepted": len(steps), "nfev": int(solver.nfev),
              "y_final": [float(v) for v in solver.y]}
    if method != "DOP853":
        record["steps"] = steps
    return record


# y' = y^2, y(0) = 1 blows up at t = 1: SciPy stops with "Required step size
# is less than spacing between numbers" (status -1), which is step_too_small.
BLOWUPS = [
    ("RK45", 0.0, 2.0, 1e-6, 1e-9),
    ("RK23", 0.0, 2.0, 1e-6, 1e-9),
]


def blowup(method, t0, t1, rtol, atol):
    sol = solve_ivp(lambda t, y: y * y, (t0, t1), [1.0], method=method, rtol=rtol, atol=atol)
    assert sol.status == -1, sol.message
    return {"method": method, "t0": t0, "t1": t1, "rtol": rtol, "atol": atol, "y0": [1.0],
            "status": int(sol.status), "message": sol.message, "nfev": int(sol.nfev),
            "accepted": len(sol.t) - 1, "t_last": float(sol.t[-1]), "y_last": [float(v) for v in sol.y[:, -1]]}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    here = os.path.dirname(os.path.abspath(__file__))
    ap.add_argument("--out", default=os.path.join(here, "..", "data", "scipy_reference.json"))
    args = ap.parse_args()

    layers = make_layers()
    field = make_field(layers)
    y0 = np.array([0.5, -0.25, 1.0])
    runs = [run(field, y0, *r) for r in RUNS]
    doc = {
        "what": "SciPy solve_ivp reference runs for tests/unit/scipy_agreement.cpp "
                "(made by tests/scipy/compare_scipy.py)",
        "scipy": scipy.__version__,
        "numpy": np.__version__,
        "seed": SEED,
        "field": [{"name": lay["name"], "in": lay["in"], "time_input": lay["time_input"],
                   "out": lay["out"], "activation": lay["activation"],
                   "weight": lay["weight"].tolist(), "bias": lay["bias"].tolist()}
                  for lay in layers],
        "y0": y0.tolist(),
        "runs": runs,
        "blowups": [blowup(*b) for b in BLOWUPS],
    }
    text = json.dumps(doc, indent=1) + "\n"
    tmp = args.out + ".tmp"
    with open(tmp, "w") as f:
        f.write(text)
    os.replace(tmp, args.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
