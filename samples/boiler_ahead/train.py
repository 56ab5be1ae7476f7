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

Writes boiler_ahead.npz, inputs.csv (40 held-out cases whose every solver
decision has |err - 1| >= 0.05, so float32 code takes the same steps; up to
20 with a rejected attempt first) and expected.csv (float64 forward pass of
the stored float32 weights).
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


def main():
    rng = np.random.default_rng(7031)
    x_tr, y_tr = make_data(rng, 6000)
    x_te, y_te = make_data(rng, 1500)
    mu, sd = x_tr.mean(axis=0), x_tr.std(axis=0)
    ymu, ysd = y_tr.mean(axis=0), y_tr.std(axis=0)
    z_tr, z_te = (x_tr - mu) / sd, (x_te - mu) / sd
    t_tr = (y_tr - ymu) / ysd
    P = tl.init_params(BLOCKS, rng)
    print(f"parameters: {tl.parameter_count(P)}")
    state = {}
    epochs, batch = 100, 128
    steps_per_epoch = len(z_tr) // batch
    for ep in range(epochs):
        lr = 4e-3 * 0.5 * (1.0 + np.cos(np.pi * ep / epochs)) + 1e-4
        perm = rng.permutation(len(z_tr))
        tot, most = 0.0, 0
        for k in range(steps_per_epoch):
            idx = perm[k * batch:(k + 1) * batch]
            tp = tl.Tape()
            out = tl.run_layers(tp, BLOCKS, P, tl.V(z_tr[idx]))
            status, attempts, _, _ = tl.STATS["heat"]
            assert np.all(status == "ok"), "training hit a solver limit"
            most = max(most, int(attempts.max()))
            loss = tl.mse_loss(tp, out, t_tr[idx])
            tp.backward(loss)
            tl.adam(P, lr, state)
            tot += float(loss.v)
        if ep % 10 == 9 or ep == epochs - 1:
            pred = tl.predict(BLOCKS, P, z_te) * ysd + ymu
            rmse = np.sqrt(np.mean((pred - y_te) ** 2, axis=0))
            print(f"epoch {ep + 1:3d}  train loss {tot / steps_per_epoch:.5f}  most attempts {most}"
                  f"  held-out RMSE water {rmse[0]:.3f} C, wall {rmse[1]:.3f} C")
    tl.fold_input_scaling(BLOCKS, P, mu, sd)
    tl.fold_output_scaling(BLOCKS, P, ymu, ysd)
    tl.to_float32(P)
    pred = tl.predict(BLOCKS, P, x_te)
    status, attempts, accepted, margin = tl.STATS["heat"]
    err = pred - y_te
    rmse = np.sqrt(np.mean(err ** 2, axis=0))
    mae = np.max(np.abs(err), axis=0)
    print(f"held-out (1500 cases, stored float32 weights, raw inputs): RMSE water {rmse[0]:.3f} C,"
          f" wall {rmse[1]:.3f} C; largest error water {mae[0]:.3f} C, wall {mae[1]:.3f} C")
    print(f"solver: all ok {bool(np.all(status == 'ok'))}; attempts per inference min {attempts.min()},"
          f" max {attempts.max()}, mean {attempts.mean():.2f},"
          f" rejected in total {int(np.sum(attempts - accepted))} (max-steps {SOLVER['max_steps']})")
    order = tl.pick_rows(40, attempts, accepted, margin)
    tl.save_sample("boiler_ahead", BLOCKS, P, x_te[order[:40]], IN_NAMES, OUT_NAMES, HERE)
    status, attempts, accepted, margin = tl.STATS["heat"]
    print(f"inputs.csv rows: attempts min {attempts.min()}, max {attempts.max()},"
          f" rows with a rejection {int(np.sum(attempts > accepted))},"
          f" smallest |err - 1| {margin.min():.3g}")


if __name__ == "__main__":
    main()
