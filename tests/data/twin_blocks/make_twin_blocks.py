"""Writes twin_blocks.mnw and inputs.csv for twin_blocks.mnd: invented weights
and inputs for a model with two continuous blocks on the same tableau (for the
measurement of one shared Runge-Kutta routine against a copy per block).

Weights: NumPy's default_rng(13), normal with standard deviation
0.9 / sqrt(columns) per layer, biases normal with deviation 0.1; inputs: 16
rows uniform in [-1, 1] from default_rng(14). Run: /usr/bin/python3
make_twin_blocks.py (NumPy)
"""
import numpy as np

layers = [("lift", 5, 10), ("f1", 11, 12), ("f2", 12, 10), ("mid", 10, 8), ("g1", 9, 12), ("g2", 12, 8), ("head", 8, 2)]
rng = np.random.default_rng(13)
lines = ["meander-weights 1", "# twin_blocks: invented weights (tests/data/twin_blocks/make_twin_blocks.py)"]


def rows(values, width):
    for i in range(0, len(values), 8):
        yield " ".join(repr(float(v)) for v in values[i:i + 8])


for name, cols, out in layers:
    w = rng.normal(0.0, 0.9 / np.sqrt(cols), size=(out, cols))
    b = rng.normal(0.0, 0.1, size=out)
    lines += ["", f"tensor {name}.weight float64 {out} {cols}"]
    for r in w:
        lines += list(rows(r, cols))
    lines += ["", f"tensor {name}.bias float64 {out}"]
    lines += list(rows(b, out))
with open("twin_blocks.mnw", "w") as f:
    f.write("\n".join(lines) + "\n")

x = np.random.default_rng(14).uniform(-1.0, 1.0, size=(16, 5))
with open("inputs.csv", "w") as f:
    f.write("x0,x1,x2,x3,x4\n")
    for r in x:
        f.write(",".join(f"{v:.6g}" for v in r) + "\n")
