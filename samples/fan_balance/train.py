"""Trains samples/fan_balance: unbalance grade of a rooftop ventilation fan
from eight vibration-node features (an invented scenario).

Run: /usr/bin/python3 samples/fan_balance/train.py   (NumPy 1.24; about 40 s)

Data (synthetic, numpy.random.default_rng(20261201)): each fan unit gets a
shaft speed, a pedestal resonance and damping, a specific unbalance e (um,
log-uniform 0.5-60) and a misalignment severity. The 1x velocity comes from
the rotating-unbalance response of a one-degree-of-freedom pedestal,
v = w * mu * e * r^2 / sqrt((1 - r^2)^2 + (2 zeta r)^2), r = w / w_n, plus a
0.25 mm/s floor and 8 % log-normal sensor noise; the other features are
nuisance or weakly informative (2x and axial ratio from misalignment, phase
jitter, bearing temperature, broadband acceleration). The grade is e split at
3, 8 and 20 um. 6000 units train, 2000 are held out.

Training: cross-entropy, Adam, mini-batches of 128; gradients are exact
reverse-mode through all 8 classic RK4 steps (4 stages each) of the
continuous block. The input standardisation is folded into the first layer
afterwards, so the deployed model reads raw sensor values.

Writes fan_balance.npz, inputs.csv (40 held-out units) and expected.csv
(float64 forward pass of the stored float32 weights).
"""
import os
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
import trainlib as tl  # noqa: E402

IN_NAMES = ["speed_hz", "v1x_mms", "v2x_mms", "axial_ratio", "phase_jitter_deg",
            "res_hz", "bearing_c", "broadband_g"]
CLASSES = ["balanced", "light", "moderate", "severe"]


def make_data(rng, n):
    speed = rng.uniform(8.0, 25.0, n)                  # shaft speed, Hz
    res = rng.uniform(13.0, 22.0, n)                   # pedestal resonance from a bump test, Hz
    zeta = rng.uniform(0.05, 0.15, n)                  # damping, not measured
    e_um = np.exp(rng.uniform(np.log(0.5), np.log(60.0), n))
    mis = rng.uniform(0.0, 1.0, n) ** 2                # misalignment severity
    r = speed / res
    w = 2.0 * np.pi * speed
    x_um = 0.6 * e_um * r * r / np.sqrt((1.0 - r * r) ** 2 + (2.0 * zeta * r) ** 2)
    v1 = np.sqrt((w * x_um * 1e-3) ** 2 + 0.25 ** 2) * np.exp(rng.normal(0.0, 0.08, n))
    v2 = (0.2 + 2.0 * mis * speed / 20.0) * np.exp(rng.normal(0.0, 0.15, n))
    axial = 0.2 + 0.6 * mis + rng.normal(0.0, 0.05, n)
    jitter = 25.0 / (1.0 + v1 / 0.6) + np.abs(rng.normal(0.0, 2.0, n))
    bearing = rng.uniform(15.0, 35.0, n) + 0.8 * v1 ** 0.5 + 0.1 * speed
    broadband = np.exp(rng.normal(np.log(0.12), 0.5, n))
    x = np.stack([speed, v1, v2, axial, jitter, res, bearing, broadband], axis=1)
    grade = np.digitize(e_um, [3.0, 8.0, 20.0])
    return x, grade


BLOCKS = [
    tl.Dense("lift", 8, 12, "tanh"),
    tl.Continuous("settle", 12, 0.0, 1.0, augment=2, field=[
        tl.Dense("f1", 14, 16, "softplus", time=True),
        tl.Dense("f2", 16, 14),
    ], solver=dict(method="rk4", steps=8)),
    tl.Residual("tidy", 14, [
        tl.Dense("r1", 14, 14, "tanh"),
        tl.Dense("r2", 14, 14),
    ]),
    tl.Dense("head", 14, 4, "softmax"),
]



def main():
    rng = np.random.default_rng(20261201)
    x_tr, y_tr = make_data(rng, 6000)
    x_te, y_te = make_data(rng, 2000)
    mu, sd, (z_tr, z_te) = tl.standardise(x_tr, x_te)
    P = tl.init_params(BLOCKS, rng)

    def report(ep, loss, _most):
        acc = np.mean(np.argmax(tl.predict(BLOCKS, P, z_te), axis=1) == y_te)
        print(f"epoch {ep + 1:3d}  train loss {loss:.4f}  held-out accuracy {acc:.4f}")
    tl.fit(BLOCKS, P, rng, z_tr, y_tr, tl.xent_loss, epochs=120, lr0=3e-3, report=report)
    tl.fold_input_scaling(BLOCKS, P, mu, sd)
    tl.to_float32(P)
    p = tl.predict(BLOCKS, P, x_te)
    acc = np.mean(np.argmax(p, axis=1) == y_te)
    conf = np.zeros((4, 4), dtype=int)
    for a, b in zip(y_te, np.argmax(p, axis=1)):
        conf[a, b] += 1
    print(f"held-out accuracy with the stored float32 weights on raw inputs: {acc:.4f} (2000 units)")
    print("confusion (rows true, columns predicted):")
    print(conf)
    tl.save_sample("fan_balance", BLOCKS, P, x_te[:40], IN_NAMES, CLASSES, HERE)


if __name__ == "__main__":
    main()
