"""Writes the files that test_standardise reads: a network trained the usual
way on standardised inputs and targets, saved by torch.save with its
standardisation buffers, and the outputs of PyTorch's own forward pass in raw
units (standardise.json).

Run with /usr/bin/python3 (PyTorch 1.13 on Debian 12):
    /usr/bin/python3 tests/data/framework_standardise.py tests/data/standardise

The network and its numbers are invented: random weights from torch.manual_seed(29),
no training. Inputs are sensor readings in raw units of very different
magnitudes (a motor's current in A, its supply in V, its speed in rpm, its
winding temperature in degrees C); the buffers x_mean, x_std, y_mean, y_std are
what a training script computes from its data (here: stated numbers).

regressor.pt: a lifting Linear(4, 6) with tanh, an ODE block whose field is
nn.Sequential(Linear(6, 8), Tanh, Linear(8, 6)) integrated with the classical
Runge-Kutta method, 4 equal steps over [0, 1] (written out below in torch), and
a head Linear(6, 2); forward(x) = head(...((x - x_mean) / x_std)) * y_std + y_mean,
all in float64 from the stored float32 values.

classifier.pt: Linear(3, 5) with tanh, then Linear(5, 4) and softmax over four
classes; forward(x) = softmax(...((x - x_mean) / x_std)). Its "argmax" is
torch.argmax of those probabilities (the first largest value).
"""
import json
import os
import sys

import torch

out = sys.argv[1]
os.makedirs(out, exist_ok=True)
torch.manual_seed(29)
expected = {}


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


class Field(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.net = torch.nn.Sequential(torch.nn.Linear(6, 8), torch.nn.Tanh(), torch.nn.Linear(8, 6))

    def forward(self, t, h):
        return self.net(h)


class Regressor(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.register_buffer("x_mean", torch.tensor([12.5, 231.0, 1480.0, 61.0]))
        self.register_buffer("x_std", torch.tensor([3.2, 4.1, 220.0, 9.5]))
        self.register_buffer("y_mean", torch.tensor([74.0, 0.82]))
        self.register_buffer("y_std", torch.tensor([6.5, 0.045]))
        self.lift = torch.nn.Linear(4, 6)
        self.func = Field()
        self.head = torch.nn.Linear(6, 2)

    def forward(self, x):
        z = (x - self.x_mean) / self.x_std
        h = torch.tanh(self.lift(z))
        h = rk4(self.func, 0.0, 1.0, 4, h)
        return self.head(h) * self.y_std + self.y_mean


class Classifier(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.register_buffer("x_mean", torch.tensor([0.35, 48.0, 2.0e-3]))
        self.register_buffer("x_std", torch.tensor([0.12, 15.0, 7.5e-4]))
        self.lift = torch.nn.Linear(3, 5)
        self.head = torch.nn.Linear(5, 4)
        with torch.no_grad():
            self.head.weight.mul_(4.0)  # a sharper head, so that the rows pick different classes

    def forward(self, x):
        z = (x - self.x_mean) / self.x_std
        return torch.softmax(self.head(torch.tanh(self.lift(z))), dim=-1)


regressor_inputs = [[12.0, 229.5, 1510.0, 58.25], [18.75, 236.0, 1190.0, 77.5], [7.5, 224.0, 1755.0, 45.0],
                    [12.5, 231.0, 1480.0, 61.0]]
classifier_inputs = [[0.2, 30.0, 1.5e-3], [0.5, 70.0, 3.0e-3], [0.35, 48.0, 2.0e-3], [0.1, 60.0, 1.0e-3],
                     [0.6, 25.0, 2.75e-3]]
for name, net, inputs in (("regressor", Regressor(), regressor_inputs), ("classifier", Classifier(), classifier_inputs)):
    torch.save({"model": net.state_dict()}, os.path.join(out, name + ".pt"))
    with torch.no_grad():
        net = net.double()
        x = torch.tensor(inputs, dtype=torch.float64)
        y = net(x)
        entry = {"inputs": inputs, "outputs": y.tolist(),
                 "buffers": {k: v.tolist() for k, v in net.state_dict().items() if k.endswith(("_mean", "_std"))}}
        if name == "classifier":
            entry["argmax"] = torch.argmax(y, dim=1).tolist()
        expected[name] = entry

with open(os.path.join(out, "standardise.json"), "w") as f:
    json.dump(expected, f, indent=1, sort_keys=True)
    f.write("\n")
