"""Trains samples/soil_probe: soil water content and pore-water salinity from
a three-frequency capacitance probe (an invented scenario).

Run: /usr/bin/python3 samples/soil_probe/train.py   (NumPy 1.24)

Data (synthetic, numpy.random.default_rng(4417)): an invented soil model.
Each case draws porosity phi (0.35-0.55), water content theta (0.03 to
phi - 0.02), clay fraction c (0-0.4), pore-water conductivity sw (0.1-4
dS/m, log-uniform) and temperature T (2-35 C). Water permittivity
ew = 88 - 0.40 T + 0.0008 T^2; the bulk permittivity e follows an invented
power-mean mixing rule with exponent 0.46 over solid (4.7), bound water
(0.15 c of the water, permittivity 30), free water and air;
bulk conductivity sb = sw theta^1.8 (1 + 0.5 c) + 0.05 c (dS/m, temperature
corrected to 25 C by 2 %/K). The probe reads the magnitude of the complex
permittivity |e - j sb / (w eps0)| at 20, 70 and 150 MHz (1.5 % noise), the
bulk conductivity at 1 kHz (5 % noise) and the temperature (0.3 C noise).
6000 cases train, 1500 are held out.

Training: mean squared error on standardised targets, Adam, mini-batches of
128. The continuous block runs backwards in its own time, t from 1 to 0, with
bogacki-shampine, rtol 1e-3, atol 1e-4, first step 0.1; each row's steps
are chosen by the controller exactly as deployed (DEVELOPERS.md "Integrator
semantics"), then the gradient flows through the accepted steps with their
step sizes held constant. The input and output standardisation (the training
set's column means and standard deviations) are stored in soil_probe.npz as
x_mean, x_std, y_mean, y_std, and the description applies them ('standardised'
on its input and output): the deployed model reads the probe's raw values.

Writes soil_probe.npz, inputs.csv and expected.csv as described at
trainlib.adaptive_regression_sample, which runs all of the above.
"""
import os
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
import trainlib as tl  # noqa: E402

IN_NAMES = ["eps_20mhz", "eps_70mhz", "eps_150mhz", "bulk_ec_dsm", "soil_c"]
OUT_NAMES = ["water_pct", "pore_ec_dsm"]
EPS0 = 8.8541878128e-12


def make_data(rng, n):
    phi = rng.uniform(0.35, 0.55, n)
    theta = 0.03 + rng.uniform(0.0, 1.0, n) * (phi - 0.05)
    clay = rng.uniform(0.0, 0.4, n)
    sw = np.exp(rng.uniform(np.log(0.1), np.log(4.0), n))
    temp = rng.uniform(2.0, 35.0, n)
    ew = 88.0 - 0.40 * temp + 0.0008 * temp ** 2
    bound = np.minimum(theta, 0.15 * clay)
    a = 0.46
    e = ((1.0 - phi) * 4.7 ** a + bound * 30.0 ** a + (theta - bound) * ew ** a + (phi - theta)) ** (1.0 / a)
    sb25 = sw * theta ** 1.8 * (1.0 + 0.5 * clay) + 0.05 * clay
    sb = sb25 * (1.0 + 0.02 * (temp - 25.0))
    reads = []
    for f_mhz in (20.0, 70.0, 150.0):
        loss = sb * 0.1 / (2.0 * np.pi * f_mhz * 1e6 * EPS0)     # dS/m -> S/m
        reads.append(np.hypot(e, loss) * (1.0 + rng.normal(0.0, 0.015, n)))
    ec = sb * (1.0 + rng.normal(0.0, 0.05, n))
    t_read = temp + rng.normal(0.0, 0.3, n)
    x = np.stack(reads + [ec, t_read], axis=1)
    y = np.stack([100.0 * theta, sw], axis=1)
    return x, y


SOLVER = dict(method="bogacki-shampine", rtol=1e-3, atol=1e-4, first_step=0.1, max_steps=40)
BLOCKS = [
    tl.Dense("lift", 5, 10, "tanh"),
    tl.Residual("pre", 10, [
        tl.Dense("p1", 10, 10, "silu"),
        tl.Dense("p2", 10, 10),
    ]),
    tl.Continuous("soak", 10, 1.0, 0.0, augment=2, field=[
        tl.Dense("s1", 12, 14, "softplus", time=True),
        tl.Dense("s2", 14, 12),
    ], solver=SOLVER),
    tl.Dense("head", 12, 2),
]


def held_out(err, rmse, y_te):
    wet = y_te[:, 0] >= 15.0
    rmse_wet = np.sqrt(np.mean(err[wet, 1] ** 2))
    print(f"held-out (1500 cases, stored float32 weights, raw inputs): RMSE water {rmse[0]:.3f} %"
          f" (volumetric), pore EC {rmse[1]:.3f} dS/m ({rmse_wet:.3f} dS/m where water >= 15 %)")


def main():
    tl.adaptive_regression_sample(
        "soil_probe", BLOCKS, "soak", seed=4417, make_data=make_data, sizes=(6000, 1500),
        epochs=80, lr0=4e-3, rmse_text=lambda r: f"water {r[0]:.3f} %, pore EC {r[1]:.3f} dS/m",
        held_out=held_out, in_names=IN_NAMES, out_names=OUT_NAMES, folder=HERE, fold=False)


if __name__ == "__main__":
    main()
