"""Trains samples/boiler_ahead: water and wall temperature of an espresso
machine boiler 30 s ahead, for the heater controller (an invented scenario).

Run: /usr/bin/python3 samples/boiler_ahead/train.py   (NumPy 1.24, SciPy 1.10)

Data (synthetic, numpy.random.default_rng(7031)): an invented two-node
thermal model of a 0.5 l boiler, water temperature Tw and heater-wall
temperature Tb, with duty u and brew flow q held over the 30 s horizon:
  Cw dTw/dt = G(Tb) (Tb - Tw) - c q (Tw - Tin) - 0.3 (Tw - Ta)
  Cb dTb/dt = 1400 u / (1 + 0.001 (Tb - 20)) - G(Tb) (Tb - Tw) - 0.6 (Tb - Ta)
  G(Tb) = 30 (1 + 0.8 / (1 + exp(-(Tb - 100) / 3)))   (nucleate boiling at the wall)
with Cw = 2093 J/K, Cb = 450 J/K, c = 4186 J/(kg K). The labels Tw(30 s) and
Tb(30 s) come from scipy.integrate.solve_ivp (RK45, rtol 1e-10, atol 1e-10).
Starting states, duty, flow (zero for 60 % of cases), inlet and ambient
temperatures are drawn uniformly; 6000 cases train, 1500 are held out.

Training: mean squared error on standardised targets, Adam, mini-batches of
128. The continuous block uses dormand-prince, rtol 1e-3, atol 1e-4; each
row's steps are chosen by the controller exactly as deployed (DEVELOPERS.md
"Integrator semantics"), then the gradient flows through the accepted steps
with their step sizes held constant. Input and output scaling are folded into
the first and last layers afterwards.

Writes boiler_ahead.safetensors, inputs.csv and expected.csv as described at
trainlib.adaptive_regression_sample, which runs all of the above.
"""
import os
import sys

import numpy as np
from scipy.integrate import solve_ivp

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))
import trainlib as tl  # noqa: E402

IN_NAMES = ["water_c", "wall_c", "duty", "flow_mlps", "inlet_c", "ambient_c"]
OUT_NAMES = ["water_30s_c", "wall_30s_c"]
CW, CB, C_WATER = 2093.0, 450.0, 4186.0


def boiler_rhs(_t, y, u, q, tin, ta):
    n = u.size
    tw, tb = y[:n], y[n:]
    g = 30.0 * (1.0 + 0.8 / (1.0 + np.exp(-(tb - 100.0) / 3.0)))
    heat = 1400.0 * u / (1.0 + 0.001 * (tb - 20.0))
    dtw = (g * (tb - tw) - C_WATER * q * 1e-3 * (tw - tin) - 0.3 * (tw - ta)) / CW
    dtb = (heat - g * (tb - tw) - 0.6 * (tb - ta)) / CB
    return np.concatenate([dtw, dtb])


def make_data(rng, n):
    tw = rng.uniform(70.0, 97.0, n)
    tb = tw + rng.uniform(-2.0, 25.0, n)
    u = rng.uniform(0.0, 1.0, n)
    q = np.where(rng.uniform(size=n) < 0.6, 0.0, rng.uniform(1.0, 4.5, n))
    tin = rng.uniform(10.0, 25.0, n)
    ta = rng.uniform(16.0, 32.0, n)
    sol = solve_ivp(boiler_rhs, (0.0, 30.0), np.concatenate([tw, tb]), method="RK45",
                    rtol=1e-10, atol=1e-10, args=(u, q, tin, ta))
    assert sol.success
    y = np.stack([sol.y[:n, -1], sol.y[n:, -1]], axis=1)
    x = np.stack([tw, tb, u, q, tin, ta], axis=1)
    return x, y


SOLVER = dict(method="dormand-prince", rtol=1e-3, atol=1e-4, max_steps=24)
BLOCKS = [
    tl.Dense("lift", 6, 10, "tanh"),
    tl.Continuous("heat", 10, 0.0, 1.0, field=[
        tl.Dense("g1", 10, 12, "tanh", time=True),
        tl.Residual("mix", 12, [
            tl.Dense("m1", 12, 12, "softplus"),
            tl.Dense("m2", 12, 12),
        ]),
        tl.Dense("g2", 12, 10),
    ], solver=SOLVER),
    tl.Dense("head", 10, 2),
]


def held_out(err, rmse, _y):
    mae = np.max(np.abs(err), axis=0)
    print(f"held-out (1500 cases, stored float32 weights, raw inputs): RMSE water {rmse[0]:.3f} C,"
          f" wall {rmse[1]:.3f} C; largest error water {mae[0]:.3f} C, wall {mae[1]:.3f} C")


def main():
    tl.adaptive_regression_sample(
        "boiler_ahead", BLOCKS, "heat", seed=7031, make_data=make_data, sizes=(6000, 1500),
        epochs=100, lr0=4e-3, rmse_text=lambda r: f"water {r[0]:.3f} C, wall {r[1]:.3f} C",
        held_out=held_out, in_names=IN_NAMES, out_names=OUT_NAMES, folder=HERE,
        weights="safetensors")


if __name__ == "__main__":
    main()
