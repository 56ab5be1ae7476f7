#!/usr/bin/python3
"""Writes one small model per activation kind for `meander cost`'s measured
cycles per activation (compiler/cost.cpp takes each kind's figure from these).

Invented data, no training: `spread: 1 -> 64` has weight 1 and biases evenly
spaced over [-8, 8], so the 16 input rows x = 0, 1/64, ..., 15/64 put the
activation's arguments evenly over [-8, 8.23] (1,024 evaluations), the range
where the kernels take each of their branches; `head: 64 -> 1` averages.
Run from this folder: /usr/bin/python3 make_probes.py (NumPy)
"""
import numpy as np

KINDS = ["tanh", "sigmoid", "softplus", "silu", "gelu", "elu", "softmax"]
WIDTH = 64


def listing(tensors, writer="make_probes.py"):
    lines = ["meander-weights 1", f"# written by {writer} (invented values, see its docstring)", ""]
    for name, a in tensors:
        lines.append(f"tensor {name} float32 " + " ".join(str(n) for n in a.shape))
        rows = a.astype(np.float32).reshape(-1, a.shape[-1])
        for row in rows:  # each row starts a line, wrapped after 8 values
            for i in range(0, row.size, 8):
                lines.append(" ".join(repr(float(v)) for v in row[i:i + 8]))
        lines.append("")
    return "\n".join(lines)


def main():
    spread_w = np.ones((WIDTH, 1), np.float32)
    spread_b = np.linspace(-8.0, 8.0, WIDTH).astype(np.float32)
    head_w = np.full((1, WIDTH), 1.0 / WIDTH, np.float32)
    head_b = np.zeros(1, np.float32)
    for kind in KINDS:
        name = f"probe_{kind}"
        if kind == "softmax":
            # softmax only ends a model: its 64 arguments are the output (exp 64 times per row).
            body = f"dense spread: 1 -> {WIDTH}, softmax\n"
        else:
            body = (f"dense spread: 1 -> {WIDTH}, {kind}\n"
                    f"dense head: {WIDTH} -> 1\n")
        with open(f"{name}.mnd", "w") as f:
            f.write(f"# One activation kind ({kind}) over arguments spread on [-8, 8]: the model\n"
                    f"# `meander cost` measures for its cycles per {kind} evaluation\n"
                    f"# (tests/data/activations/make_probes.py wrote it).\n"
                    f"model {name}\n"
                    f"weights \"{name}.mnw\"\n\n"
                    f"input x[1]\n{body}output y[{WIDTH if kind == 'softmax' else 1}]\n")
        with open(f"{name}.mnw", "w") as f:
            tensors = [("spread.weight", spread_w), ("spread.bias", spread_b)]
            if kind != "softmax":
                tensors += [("head.weight", head_w), ("head.bias", head_b)]
            f.write(listing(tensors))
    with open("inputs.csv", "w") as f:
        f.write("x\n")
        for i in range(16):
            f.write(f"{i / 64!r}\n")


if __name__ == "__main__":
    main()
