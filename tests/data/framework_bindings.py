"""Writes the weight files that test_bindings reads, laid out and named the way
training code leaves them, and the outputs that each network gives in the
framework's own forward pass (bindings.json).

Run with /usr/bin/python3 (PyTorch 1.13 and NumPy 1.24 on Debian 12):
    /usr/bin/python3 tests/data/framework_bindings.py tests/data/bindings

The networks are invented: random weights from fixed seeds, no training.

1. sequential.pt (torch.save of a training checkpoint): a lifting Linear, an
   ODE block whose field is nn.Sequential(Linear, Tanh, Linear) (names
   func.net.0, func.net.2), a residual nn.Sequential(Linear, ReLU, Linear)
   (polish.0, polish.2), a head; beside them the buffers a sensor model
   carries (mean, std) and an unused BatchNorm1d's running statistics. The
   ODE block is integrated with the classical Runge-Kutta method (RK4), 6
   equal steps over [0, 1], written out below in torch.
2. in_out.npz (numpy.savez): the same kind of network with every weight
   stored (in, out), as y = x @ W + b code keeps it, and a field layer that
   reads time first: f(t, h) = W2^T tanh(W1^T [t; h] + b1) + b2; forward pass
   in NumPy, RK4 with 5 steps over [0, 0.5].
"""
import json
import os
import sys

import numpy as np
import torch

out = sys.argv[1]
os.makedirs(out, exist_ok=True)
expected = {}
inputs = [[0.5, -1.0, 2.0], [0.0, 0.25, -0.75], [1.5, 1.0, 0.125]]


def rk4(f, t0, t1, steps, y):
    h = (t1 - t0) / steps
    for i in range(steps):
        t = t0 + i * h
        k1 = f(t, y)
        k2 = f(t + h / 2, y + h / 2 * k1)
        k3 = f(t + h / 2, y + h / 2 * k2)
        k4 = f(t + h, y + h * k3)
        y = y + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
    return y


# ---- 1. a PyTorch checkpoint with nn.Sequential names --------------------------
torch.manual_seed(13)


class Field(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.net = torch.nn.Sequential(torch.nn.Linear(5, 7), torch.nn.Tanh(), torch.nn.Linear(7, 5))

    def forward(self, t, h):
        return self.net(h)


class Net(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.register_buffer("mean", torch.tensor([0.1, 0.2, 0.3]))
        self.register_buffer("std", torch.tensor([1.0, 2.0, 3.0]))
        self.stats = torch.nn.BatchNorm1d(5, affine=False)   # running statistics only, unused here
        self.lift = torch.nn.Linear(3, 5)
        self.func = Field()
        self.polish = torch.nn.Sequential(torch.nn.Linear(5, 5), torch.nn.ReLU(), torch.nn.Linear(5, 5))
        self.head = torch.nn.Linear(5, 2)

    def forward(self, x):
        h = torch.tanh(self.lift(x))
        h = rk4(self.func, 0.0, 1.0, 6, h)
        h = h + self.polish(h)
        return self.head(h)


net = Net()
sd = net.state_dict()
adam = torch.optim.Adam(net.parameters())
torch.save({"model": sd, "optimizer": adam.state_dict(), "epoch": 40}, os.path.join(out, "sequential.pt"))
with torch.no_grad():
    net = net.double()
    expected["sequential"] = {
        "keys": list(sd.keys()),
        "inputs": inputs,
        "outputs": [net(torch.tensor(x, dtype=torch.float64)).tolist() for x in inputs],
    }

# ---- 2. NumPy weights stored (in, out), time first --------------------------------
rng = np.random.default_rng(21)


def w(shape):
    return rng.normal(0.0, 0.6, size=shape).astype(np.float32)


arrays = {
    "enc.kernel": w((3, 4)), "enc.bias": w((4,)),
    "f1.kernel": w((1 + 4, 6)), "f1.bias": w((6,)),   # row 0 multiplies t
    "f2.kernel": w((6, 4)), "f2.bias": w((4,)),
    "dec.kernel": w((4, 2)), "dec.bias": w((2,)),
}
np.savez(os.path.join(out, "in_out.npz"), **arrays)
a = {k: v.astype(np.float64) for k, v in arrays.items()}


def field(t, h):
    z = np.tanh(np.concatenate([[t], h]) @ a["f1.kernel"] + a["f1.bias"])
    return z @ a["f2.kernel"] + a["f2.bias"]


def forward(x):
    h = np.asarray(x) @ a["enc.kernel"] + a["enc.bias"]
    h = rk4(field, 0.0, 0.5, 5, h)
    return h @ a["dec.kernel"] + a["dec.bias"]


expected["in_out"] = {"inputs": inputs, "outputs": [forward(x).tolist() for x in inputs]}

with open(os.path.join(out, "bindings.json"), "w") as f:
    json.dump(expected, f, indent=1, sort_keys=True)
    f.write("\n")
