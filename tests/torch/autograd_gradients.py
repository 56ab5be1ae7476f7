#!/usr/bin/python3
"""Reference gradients for tests/unit/gradient.cpp, computed with PyTorch
autograd in double precision through the same fixed Runge-Kutta steps.

The model (invented for the test, weights from a seeded generator):
    input x[3]
    dense lift: 3 -> 4, tanh
    continuous flow: 4, t in [0, 1.5] { augment 2
        dense f1: 6 + t -> 8, gelu   (tanh form)
        residual r: 8 { dense r1: 8 -> 8, silu }
        dense f2: 8 -> 6, softplus-free identity
        solver rk4, steps 5 }
    residual polish: 6 { dense p1: 6 -> 6, elu 0.7 ; dense p2: 6 -> 6, leaky-relu 0.1 }
    dense mid: 6 -> 5, sigmoid
    dense mid2: 5 -> 5, softplus
    dense head: 5 -> 3, softmax
Loss: L = sum_i w_i * out_i with a fixed w. A second case integrates the continuous
block alone with Dormand-Prince over given uneven steps (step sizes held fixed),
L = sum_i v_i * h_i(1.5).

Writes JSON: weights, and per case the inputs, loss weights, steps
([t, h, t_new] each), and the gradients with respect to the input and every
tensor the case uses. Run:
    /usr/bin/python3 tests/torch/autograd_gradients.py OUT.json
"""
import json
import math
import sys
from fractions import Fraction as F

import torch

torch.set_default_dtype(torch.float64)
gen = torch.Generator().manual_seed(20261202)

LAYERS = [  # name, in_total, out, has_bias
    ("lift", 3, 4, True),
    ("f1", 7, 8, True),
    ("r1", 8, 8, True),
    ("f2", 8, 6, False),
    ("p1", 6, 6, True),
    ("p2", 6, 6, True),
    ("mid", 6, 5, True),
    ("mid2", 5, 5, True),
    ("head", 5, 3, True),
]

# Butcher tableaux written from their publications (Kutta 1901; Dormand & Prince 1980).
RK4 = dict(c=[0, F(1, 2), F(1, 2), 1], a=[[], [F(1, 2)], [0, F(1, 2)], [0, 0, 1]], b=[F(1, 6), F(1, 3), F(1, 3), F(1, 6)])
DOPRI = dict(
    c=[0, F(1, 5), F(3, 10), F(4, 5), F(8, 9), 1],
    a=[[], [F(1, 5)], [F(3, 40), F(9, 40)], [F(44, 45), F(-56, 15), F(32, 9)],
       [F(19372, 6561), F(-25360, 2187), F(64448, 6561), F(-212, 729)],
       [F(9017, 3168), F(-355, 33), F(46732, 5247), F(49, 176), F(-5103, 18656)]],
    b=[F(35, 384), 0, F(500, 1113), F(125, 192), F(-2187, 6784), F(11, 84)],
)


def gelu_tanh(z):
    return 0.5 * z * (1 + torch.tanh(math.sqrt(2 / math.pi) * (z + 0.044715 * z ** 3)))


def main(out_path):
    params = {}
    for name, fan_in, fan_out, bias in LAYERS:
        params[name + ".weight"] = (torch.rand(fan_out, fan_in, generator=gen) * 2 - 1) * (1.2 / math.sqrt(fan_in))
        if bias:
            params[name + ".bias"] = (torch.rand(fan_out, generator=gen) * 2 - 1) * 0.3
    for p in params.values():
        p.requires_grad_(True)

    def dense(name, x, act=None, param=None):
        y = params[name + ".weight"] @ x
        if name + ".bias" in params:
            y = y + params[name + ".bias"]
        if act == "tanh": return torch.tanh(y)
        if act == "gelu": return gelu_tanh(y)
        if act == "silu": return y * torch.sigmoid(y)
        if act == "elu": return torch.where(y > 0, y, param * torch.expm1(torch.clamp(y, max=0)))
        if act == "leaky": return torch.where(y >= 0, y, param * y)
        if act == "sigmoid": return torch.sigmoid(y)
        if act == "softplus": return torch.nn.functional.softplus(y)
        if act == "softmax": return torch.softmax(y, dim=0)
        return y

    def field(t, h):
        u = dense("f1", torch.cat([h, torch.reshape(t, (1,))]), "gelu")
        u = u + dense("r1", u, "silu")
        return dense("f2", u)

    def integrate(tab, plan, h):
        for (t, dt, t_new) in plan:
            k = []
            for i, ci in enumerate(tab["c"]):
                if i == 0:
                    arg = h
                else:
                    arg = h + dt * sum(float(a) * kj for a, kj in zip(tab["a"][i], k) if a != 0)
                k.append(field(torch.tensor(t + float(ci) * dt), arg))
            h = h + dt * sum(float(b) * kj for b, kj in zip(tab["b"], k) if b != 0)
        return h

    def model(x, tab, plan):
        h = dense("lift", x, "tanh")
        h = integrate(tab, plan, torch.cat([h, torch.zeros(2)]))
        h = h + dense("p2", dense("p1", h, "elu", 0.7), "leaky", 0.1)
        h = dense("mid", h, "sigmoid")
        h = dense("mid2", h, "softplus")
        return dense("head", h, "softmax")

    x0 = torch.tensor([0.7, -1.1, 0.4])
    w = torch.tensor([0.9, -1.3, 0.45])
    cases = []
    t0, t1, n = 0.0, 1.5, 5
    step = (t1 - t0) / n  # meander's fixed-step rule: t_i = t0 + i*h, the step ends at t_i + h
    rk4_plan = [(t0 + i * step, step, t0 + i * step + step) for i in range(n)]
    dp_times = [0.0, 0.11, 0.37, 0.8, 1.22, 1.5]  # uneven steps, as an adaptive run's accepted ones
    dp_plan = [(a, b - a, b) for a, b in zip(dp_times[:-1], dp_times[1:])]
    # The whole model through rk4's five steps.
    x = x0.clone().requires_grad_(True)
    out = model(x, RK4, rk4_plan)
    (w @ out).backward()
    cases.append(dict(method="rk4", part="model", steps=[list(p) for p in rk4_plan], input=x0.tolist(),
                      loss_weights=w.tolist(), output=out.tolist(), input_grad=x.grad.tolist(),
                      grads={k: v.grad.tolist() for k, v in params.items() if v.grad is not None}))
    # The continuous block alone through Dormand-Prince's uneven steps.
    for p in params.values():
        p.grad = None
    h0 = torch.tensor([0.3, -0.8, 0.5, 0.1, 0.0, 0.0])
    w_block = torch.tensor([1.0, -0.5, 0.25, 0.75, -1.5, 0.6])
    h = h0.clone().requires_grad_(True)
    out = integrate(DOPRI, dp_plan, h)
    (w_block @ out).backward()
    cases.append(dict(method="dormand-prince", part="block", steps=[list(p) for p in dp_plan], input=h0.tolist(),
                      loss_weights=w_block.tolist(), output=out.tolist(), input_grad=h.grad.tolist(),
                      grads={k: v.grad.tolist() for k, v in params.items() if v.grad is not None}))
    doc = dict(source="PyTorch %s autograd, float64" % torch.__version__, weights={k: v.tolist() for k, v in params.items()}, cases=cases)
    with open(out_path, "w") as f:
        json.dump(doc, f, indent=1)


if __name__ == "__main__":
    main(sys.argv[1])
