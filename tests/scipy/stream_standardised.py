#!/usr/bin/python3
"""Outside reference for a streaming model with a standardised observation and readout
(tests/data/stream_standardised, tests/unit/stream_standardised.cpp).

A float64 NumPy forward pass over a sequence file, from samples/check_expected.py's own
description parser and tensor reader (no meander code): per row the state evolves over the
gap with the fixed-step rk4 written out there (ceil(2 gap) steps), the GRU cell (after
PyTorch's GRUCell documentation) reads (x - mean) / scale, and the readout y leaves as
y * scale + mean. Writes the outputs as CSV (--out), one row per observation; the committed
copy is tests/data/stream_standardised/expected.csv.

    /usr/bin/python3 tests/scipy/stream_standardised.py --out tests/data/stream_standardised/expected.csv
"""
import argparse
import os
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(os.path.dirname(HERE))
sys.path.insert(0, os.path.join(ROOT, "samples"))

import check_expected  # noqa: E402


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--model", default=os.path.join(ROOT, "tests/data/stream_standardised/stream_standardised.mnd"))
    ap.add_argument("--input", default=os.path.join(ROOT, "samples/parcel_chill/inputs.csv"))
    ap.add_argument("--out", required=True)
    a = ap.parse_args()
    model = check_expected.Model(a.model)
    _, rows = check_expected.read_sequence_csv(a.input)
    got = model.sequences(rows)
    with open(a.out, "w") as fh:
        fh.write("core_c.0\n")
        for y in got:
            fh.write(",".join(repr(float(v)) for v in y) + "\n")


if __name__ == "__main__":
    main()
