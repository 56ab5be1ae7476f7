#!/usr/bin/python3
"""Writes int_blocks: a model whose layers end in blocks of every size the
dense kernels have (4 rows a block; the rows left over make a block of 3, 1
or 2), for the target tests that run it with int8 and int16 weights and
compare the bits of the integer steps (assembly on the Cortex-M4F and M7,
plain C++ on the host and the Cortex-M3). The samples' layers leave blocks
of 4 and 2 only.

Invented data, no training: weights and biases drawn from a normal
distribution (NumPy's default_rng(20261203), scale 0.5), 16 input rows drawn
uniformly from [-2, 2]; expected.csv is `meander eval`'s double-precision
output with float weights.
Run from this folder: /usr/bin/python3 make_int_blocks.py MEANDER (NumPy)
"""
import os
import subprocess
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "activations"))
from make_probes import listing  # noqa: E402  (the same weights listing as the probes')

LAYERS = [("a", 5, 7, "tanh"), ("b", 7, 5, ""), ("c", 5, 6, "sigmoid")]


def main():
    meander = sys.argv[1] if len(sys.argv) > 1 else "meander"
    rng = np.random.default_rng(20261203)
    tensors = []
    for name, n_in, n_out, _ in LAYERS:
        tensors.append((f"{name}.weight", (0.5 * rng.standard_normal((n_out, n_in))).astype(np.float32)))
        tensors.append((f"{name}.bias", (0.5 * rng.standard_normal(n_out)).astype(np.float32)))
    rows = rng.uniform(-2.0, 2.0, (16, LAYERS[0][1])).astype(np.float32)
    with open("int_blocks.mnd", "w") as f:
        f.write("# Layers whose last blocks have 3, 1 and 2 rows, for the integer steps'\n"
                "# target tests (make_int_blocks.py wrote it; invented weights).\n"
                "model int_blocks\n"
                "weights \"int_blocks.mnw\"\n\n"
                f"input x[{LAYERS[0][1]}]\n")
        for name, n_in, n_out, act in LAYERS:
            f.write(f"dense {name}: {n_in} -> {n_out}{', ' + act if act else ''}\n")
        f.write(f"output y[{LAYERS[-1][2]}]\n")
    with open("int_blocks.mnw", "w") as f:
        f.write(listing(tensors, "make_int_blocks.py"))
    with open("inputs.csv", "w") as f:
        f.write(",".join(f"x{i}" for i in range(rows.shape[1])) + "\n")
        for r in rows:
            f.write(",".join(repr(float(v)) for v in r) + "\n")
    subprocess.run([meander, "eval", "int_blocks.mnd", "--input", "inputs.csv", "--output", "expected.csv"], check=True)


if __name__ == "__main__":
    main()
