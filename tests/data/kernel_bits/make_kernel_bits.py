#!/usr/bin/python3
"""Writes one model per activation kind whose outputs are that kind's values
themselves, for the target tests' bit comparison (tests/target: every float32
build, host g++ and clang++, ARM Linux, Cortex-M4F, M3 and M7, must print the
same bits): the samples use tanh, softplus, silu and softmax only, and an
average over a layer could hide a differing last bit.

Invented data, no training: `act: 1 -> 256` has weight 1 on every row but
the last 32, which have +-2^-10 ... 2^-41 (signs alternating); biases: 160
evenly over [-12, 12], 64 evenly over [-100, 100] (the kernels' outer
branches: overflow, underflow, subnormal results), 32 zeros. The 16 input rows x = i 24/255/16 fill the gaps between
the first biases, so the arguments cover [-12, 12] every 0.0059 or so, and the
last 32 outputs take arguments of either sign from 9e-5 down to 4e-14 (the
small-argument polynomials).
Each model in a folder of its own (kernel_bits_KIND/: KIND.mnd, .mnw, inputs.csv
and expected.csv, `meander eval`'s double-precision outputs), as a sample's.
Run from this folder: /usr/bin/python3 make_kernel_bits.py MEANDER (NumPy)
"""
import os
import subprocess
import sys

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "activations"))
from make_probes import listing  # noqa: E402  (the same weights listing as the probes')

KINDS = ["tanh", "sigmoid", "softplus", "silu", "gelu", "elu", "softmax"]
WIDTH = 256


def main():
    meander = sys.argv[1] if len(sys.argv) > 1 else "meander"
    weight = np.ones((WIDTH, 1), np.float32)
    weight[-32:, 0] = 2.0 ** -np.arange(10, 42) * np.tile([1.0, -1.0], 16)
    bias = np.concatenate([np.linspace(-12.0, 12.0, 160), np.linspace(-100.0, 100.0, 64), np.zeros(32)])
    inputs = "x\n" + "".join(f"{float(np.float32(i * 24.0 / 255.0 / 16.0))!r}\n" for i in range(16))
    for kind in KINDS:
        name = f"kernel_bits_{kind}"
        os.makedirs(name, exist_ok=True)
        with open(f"{name}/inputs.csv", "w") as f:
            f.write(inputs)
        with open(f"{name}/{name}.mnd", "w") as f:
            f.write(f"# The {kind} kernel's own values as outputs: the target tests compare their\n"
                    f"# bits across every float32 build (make_kernel_bits.py wrote it).\n"
                    f"model {name}\n"
                    f"weights \"{name}.mnw\"\n\n"
                    f"input x[1]\n"
                    f"dense act: 1 -> {WIDTH}, {kind}\n"
                    f"output y[{WIDTH}]\n")
        with open(f"{name}/{name}.mnw", "w") as f:
            f.write(listing([("act.weight", weight), ("act.bias", bias.astype(np.float32))], "make_kernel_bits.py"))
        subprocess.run([meander, "eval", f"{name}/{name}.mnd", "--input", f"{name}/inputs.csv",
                        "--output", f"{name}/expected.csv"], check=True)


if __name__ == "__main__":
    main()
