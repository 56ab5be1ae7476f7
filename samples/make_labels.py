#!/usr/bin/python3
"""Writes samples/*/labels.csv: the held-out labels of each sample's inputs.csv
rows, from the sample's own invented generator (its train.py make_data); and
samples/*/unlabelled.csv: 2000 further input rows from the same generator
(numpy.random.default_rng(seed + 1), a stream neither training nor inputs.csv
used), the unlabelled inputs `meander refit` learns on; and
samples/*/refit_labels.csv: the generator's labels of those same rows, for
`meander refit --fit labels` (training on labels rather than on the reference).

With `--held-out DIR` it also writes DIR/NAME_held_out.csv and
DIR/NAME_held_out_labels.csv: the trainer's whole held-out set (not trained
on), for figures over more rows than inputs.csv holds.

Each trainer draws a training set and then a held-out set from
numpy.random.default_rng(seed); inputs.csv holds 40 held-out rows. This script
draws the same two sets again, finds each inputs.csv row among the held-out
rows (the nearest, which must agree to the printed digits), and writes that
row's label: the true targets for the regression samples, the class index for
fan_balance. No model output is involved.

Run: /usr/bin/python3 samples/make_labels.py   (NumPy 1.24, SciPy 1.10)
"""
import argparse
import csv
import importlib.util
import os

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
# sample, seed, (train, held out) sizes, label header
SAMPLES = [
    ("boiler_ahead", 7031, (6000, 1500), ["water_30s_c", "wall_30s_c"]),
    ("soil_probe", 4417, (6000, 1500), ["water_pct", "pore_ec_dsm"]),
    ("fan_balance", 20261201, (6000, 2000), ["grade"]),
]


def load(name):
    spec = importlib.util.spec_from_file_location(name + "_train", os.path.join(HERE, name, "train.py"))
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def write_labels(path, header, ys):
    with open(path, "w") as fh:
        fh.write(",".join(header) + "\n")
        for y in ys:
            y = np.atleast_1d(y)
            fh.write(",".join(repr(float(v)) if header[0] != "grade" else str(int(v)) for v in y) + "\n")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--held-out", metavar="DIR", help="also write each sample's whole held-out set here")
    args = ap.parse_args()
    for name, seed, sizes, header in SAMPLES:
        mod = load(name)
        rng = np.random.default_rng(seed)
        mod.make_data(rng, sizes[0])
        x_te, y_te = mod.make_data(rng, sizes[1])
        with open(os.path.join(HERE, name, "inputs.csv")) as fh:
            rows = [list(map(float, r)) for r in list(csv.reader(fh))[1:] if r]
        out = []
        for r in rows:
            d = np.max(np.abs(x_te - np.array(r)) / np.maximum(1.0, np.abs(x_te)), axis=1)
            i = int(np.argmin(d))
            assert d[i] < 1e-4, (name, r, d[i])
            out.append(y_te[i])
        write_labels(os.path.join(HERE, name, "labels.csv"), header, out)
        x_more, y_more = mod.make_data(np.random.default_rng(seed + 1), 2000)
        with open(os.path.join(HERE, name, "unlabelled.csv"), "w") as fh:
            with open(os.path.join(HERE, name, "inputs.csv")) as src:
                fh.write(src.readline())  # the same header
            for r in x_more:
                fh.write(",".join(f"{v:.6g}" for v in r) + "\n")
        write_labels(os.path.join(HERE, name, "refit_labels.csv"), header, y_more)
        if args.held_out:
            os.makedirs(args.held_out, exist_ok=True)
            with open(os.path.join(HERE, name, "inputs.csv")) as src:
                head = src.readline()
            with open(os.path.join(args.held_out, name + "_held_out.csv"), "w") as fh:
                fh.write(head)
                for r in x_te:
                    fh.write(",".join(repr(float(v)) for v in r) + "\n")
            write_labels(os.path.join(args.held_out, name + "_held_out_labels.csv"), header, y_te)
        print(f"{name}: {len(out)} labels, {len(x_more)} unlabelled rows")


if __name__ == "__main__":
    main()
