#!/usr/bin/python3
"""Trains the parcel_chill sample (an ODE-RNN); run with /usr/bin/python3 (PyTorch).

Writes parcel_chill.pt (torch.save of the float32 state dict, which the
description's `weights` line reads as it is), inputs.csv (a sequence file of held-out trips) and
expected.csv (this script's own float64 forward pass over inputs.csv), and
prints the held-out error. The data are invented; see README.md.
"""
import math
import os

import numpy as np
import torch

HERE = os.path.dirname(os.path.abspath(__file__))
STATE, HIDDEN = 8, 16
STEPS_PER_UNIT = 2.0        # rk4 steps per hour of gap
LARGEST_GAP = 4.0           # hours
T_SCALE, T_SHIFT = 8.0, 10.0


def simulate_trip(rng, n_obs):
    """One trip: ambient temperature, the parcel's surface and core, observed at irregular times."""
    dt = 0.01
    gaps = np.exp(rng.uniform(math.log(0.15), math.log(LARGEST_GAP), size=n_obs - 1))
    times = np.round(np.concatenate([[rng.uniform(0, 1)], gaps]).cumsum(), 3)
    horizon = times[-1] + dt
    grid = np.arange(0.0, horizon + dt, dt)
    # Ambient: legs of the trip (cold truck, loading dock, delivery van), each held a while.
    amb = np.empty_like(grid)
    t, i = 0.0, 0
    while i < grid.size:
        kind = rng.choice(3, p=[0.5, 0.25, 0.25])
        level = [rng.normal(4.0, 1.5), rng.normal(20.0, 3.0), rng.normal(11.0, 2.0)][kind]
        length = rng.exponential([5.0, 1.2, 2.0][kind]) + 0.3
        j = min(grid.size, i + int(length / dt))
        amb[i:j] = level + rng.normal(0, 0.3, size=j - i).cumsum() * 0.05
        i = max(j, i + 1)
    # Surface follows ambient within ~0.3 h, the core within ~2.5 h (exact exponential updates).
    surf = np.empty_like(grid)
    core = np.empty_like(grid)
    surf[0] = amb[0]
    core[0] = rng.normal(5.0, 1.0)          # pre-cooled goods
    a_s, a_c = math.exp(-dt / 0.3), math.exp(-dt / 2.5)
    for k in range(1, grid.size):
        surf[k] = a_s * surf[k - 1] + (1 - a_s) * amb[k - 1]
        core[k] = a_c * core[k - 1] + (1 - a_c) * surf[k - 1]
    idx = np.clip(np.round(times / dt).astype(int), 0, grid.size - 1)
    reading = surf[idx] + rng.normal(0, 0.25, size=n_obs)     # the logger's thermistor
    return times, np.round(reading, 2), core[idx]


class OdeRnn(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.f1 = torch.nn.Linear(STATE, HIDDEN)
        self.f2 = torch.nn.Linear(HIDDEN, STATE)
        self.cell = torch.nn.GRUCell(1, STATE)
        self.head = torch.nn.Linear(STATE, 1)

    def field(self, h):
        return self.f2(torch.tanh(self.f1(h)))

    def evolve(self, h, gap):
        # rk4 with ceil(gap * steps-per-unit) equal steps per row, as meander's evolution.
        n = torch.ceil(gap * STEPS_PER_UNIT)
        step = torch.where(n > 0, gap / torch.clamp(n, min=1), torch.zeros_like(gap))[:, None]
        for k in range(int(n.max().item())):
            k1 = self.field(h)
            k2 = self.field(h + step * (0.5 * k1))
            k3 = self.field(h + step * (0.5 * k2))
            k4 = self.field(h + step * k3)
            nxt = h + step * (k1 / 6 + k2 / 3 + k3 / 3 + k4 / 6)
            h = torch.where((k < n)[:, None], nxt, h)
        return h

    def forward(self, x, gaps):
        # x: (batch, steps, 1) scaled readings; gaps: (batch, steps)
        h = torch.zeros(x.shape[0], STATE, dtype=x.dtype)
        out = []
        for i in range(x.shape[1]):
            h = self.evolve(h, gaps[:, i])
            h = self.cell(x[:, i], h)
            out.append(self.head(h))
        return torch.stack(out, 1)


def batch(trips):
    times = np.stack([t for t, _, _ in trips])
    gaps = np.diff(times, axis=1, prepend=times[:, :1])
    x = (np.stack([r for _, r, _ in trips]) - T_SHIFT) / T_SCALE
    y = (np.stack([c for _, _, c in trips]) - T_SHIFT) / T_SCALE
    return (torch.tensor(x[..., None]), torch.tensor(gaps), torch.tensor(y[..., None]))


def main():
    rng = np.random.default_rng(6021)
    torch.manual_seed(6021)
    n_obs = 32
    train = [simulate_trip(rng, n_obs) for _ in range(192)]
    held = [simulate_trip(rng, n_obs) for _ in range(64)]
    xt, gt, yt = batch(train)
    xh, gh, yh = batch(held)
    model = OdeRnn().double()
    opt = torch.optim.Adam(model.parameters(), lr=1e-2)
    sched = torch.optim.lr_scheduler.StepLR(opt, 60, 0.3)
    for epoch in range(150):
        opt.zero_grad()
        loss = torch.mean((model(xt, gt) - yt) ** 2)
        loss.backward()
        opt.step()
        sched.step()
        if epoch % 25 == 0:
            print(f"epoch {epoch}: train rmse {math.sqrt(loss.item()) * T_SCALE:.3f} C", flush=True)
    with torch.no_grad():
        rmse = torch.sqrt(torch.mean((model(xh, gh) - yh) ** 2)).item() * T_SCALE
        naive = torch.sqrt(torch.mean((xh - yh) ** 2)).item() * T_SCALE
    print(f"held-out core temperature RMSE: {rmse:.3f} C over {len(held)} trips x {n_obs} observations "
          f"(last reading as the core temperature: {naive:.3f} C)")

    # Fold the input and output scaling into the GRU cell's input weights and the head.
    sd = {k: v.detach().clone() for k, v in model.state_dict().items()}
    sd["cell.bias_ih"] = sd["cell.bias_ih"] - sd["cell.weight_ih"][:, 0] * (T_SHIFT / T_SCALE)
    sd["cell.weight_ih"] = sd["cell.weight_ih"] / T_SCALE
    sd["head.weight"] = sd["head.weight"] * T_SCALE
    sd["head.bias"] = sd["head.bias"] * T_SCALE + T_SHIFT
    torch.save({k: v.to(torch.float32) for k, v in sd.items()}, os.path.join(HERE, "parcel_chill.pt"))

    # inputs.csv: three held-out trips; expected.csv: the saved float32 weights in float64 arithmetic.
    model32 = OdeRnn().double()
    model32.load_state_dict({k: torch.tensor(v.numpy().astype(np.float32), dtype=torch.float64) for k, v in sd.items()})
    lines, expected = ["trip,hour,surface_c"], ["core_c.0"]
    for n, (times, reading, _) in enumerate(held[:3]):
        for t, r in zip(times, reading):
            lines.append(f"trip{n + 1},{t:g},{r:g}")
        # The gaps meander computes: differences of the time stamps as written.
        ts = np.array([float(f"{t:g}") for t in times])
        gaps = np.diff(ts, prepend=ts[:1])
        x = torch.tensor(np.array([float(f"{r:g}") for r in reading])[None, :, None])
        with torch.no_grad():
            y = model32(x, torch.tensor(gaps[None, :]))[0, :, 0].numpy()
        expected += [repr(float(v)) for v in y]
    with open(os.path.join(HERE, "inputs.csv"), "w") as f:
        f.write("\n".join(lines) + "\n")
    with open(os.path.join(HERE, "expected.csv"), "w") as f:
        f.write("\n".join(expected) + "\n")


if __name__ == "__main__":
    main()
