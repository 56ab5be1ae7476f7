#!/usr/bin/python3
"""The drift scenario of fan_balance (invented): one node in the field.

The node was re-clamped on another fan's pedestal. Its accelerometer now reads
the 1x and 2x velocities 30 % high (another sensitivity), and its bearing
thermistor 4 deg C high (mounted nearer the motor). What the node should report
is what the bench-calibrated node would report on the true readings.

From the sample's unlabelled rows 0-199 (train.py's held-out units, never
trained on): the true readings, the drifted readings the node sees, and as
targets the shipped model's grade probabilities on the true readings
(`meander eval`). Rows 0-119 are the node's own data to learn from, rows
120-199 are held out.

    /usr/bin/python3 samples/fan_balance/drift/make_drift.py --meander build/meander
"""
import argparse
import csv
import os
import subprocess
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
SAMPLE = os.path.dirname(HERE)
ROWS, LEARN = 200, 120
GAIN = {"v1x_mms": 1.3, "v2x_mms": 1.3}
OFFSET = {"bearing_c": 4.0}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--meander", required=True)
    args = ap.parse_args()
    with open(os.path.join(SAMPLE, "unlabelled.csv")) as f:
        rows = list(csv.reader(f))
    header, body = rows[0], rows[1:ROWS + 1]
    true = [[float(v) for v in r] for r in body]
    drifted = []
    for r in true:
        d = []
        for name, v in zip(header, r):
            d.append(v * GAIN.get(name, 1.0) + OFFSET.get(name, 0.0))
        drifted.append(d)
    with tempfile.TemporaryDirectory() as tmp:
        clean = os.path.join(tmp, "clean.csv")
        with open(clean, "w") as f:
            f.write(",".join(header) + "\n")
            for r in true:
                f.write(",".join(repr(v) for v in r) + "\n")
        out = os.path.join(tmp, "out.csv")
        subprocess.run([args.meander, "eval", os.path.join(SAMPLE, "fan_balance.mnd"), "--input", clean,
                        "--output", out], check=True)
        with open(out) as f:
            probs = [r for r in csv.reader(f)][1:]

    def write(name, rows_, head):
        with open(os.path.join(HERE, name), "w") as f:
            f.write(",".join(head) + "\n")
            for r in rows_:
                f.write(",".join(r if isinstance(r[0], str) else [f"{v:.9g}" for v in r]) + "\n")

    write("learn_inputs.csv", drifted[:LEARN], header)
    write("learn_targets.csv", probs[:LEARN], ["balanced", "light", "moderate", "severe"])
    write("heldout_inputs.csv", drifted[LEARN:], header)
    write("heldout_targets.csv", probs[LEARN:], ["balanced", "light", "moderate", "severe"])


if __name__ == "__main__":
    main()
