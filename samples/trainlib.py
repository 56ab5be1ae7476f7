"""Shared by the sample trainers (samples/*/train.py); run with /usr/bin/python3.

A small reverse-mode autodiff over NumPy float64 arrays, the three kinds of
block of a meander description (dense, residual, continuous), Runge-Kutta
integration that follows DEVELOPERS.md "Integrator semantics", Adam, the
training loop and the run of an adaptive regression sample, and the
writers of the sample files (<name>.npz or <name>.safetensors, inputs.csv,
expected.csv).

Gradients through a continuous block:
- fixed step: exact reverse-mode through every stage of the N steps;
- adaptive: the step sequence is chosen by an untaped pass that follows the
  controller exactly, per row; the taped pass then replays the accepted steps
  with their (t, h) held constant (rejected attempts do not enter the graph),
  so the gradient is that of the discrete solution with frozen step sizes.
"""

import json
import os
import struct
from fractions import Fraction as Fr

import numpy as np

# ---------------------------------------------------------------- autodiff

class V:
    """A node: value `v` (float64 array) and accumulated gradient `g`."""
    __slots__ = ("v", "g")

    def __init__(self, v):
        self.v = v
        self.g = None

    def acc(self, g):
        self.g = g if self.g is None else self.g + g


class Tape:
    """Backward closures in forward order; `record=False` builds no graph."""

    def __init__(self, record=True):
        self.record = record
        self.ops = []

    def add(self, fn):
        if self.record:
            self.ops.append(fn)

    def backward(self, out, g=None):
        out.g = np.ones_like(out.v) if g is None else g
        for fn in reversed(self.ops):
            fn()
        self.ops = []


def affine(tp, x, W, b, tcol=None):
    """x @ W.T + b; `tcol` (rows, 1) joins the input as its last column."""
    xin = x.v if tcol is None else np.hstack([x.v, tcol])
    out = V(xin @ W.v.T + (0.0 if b is None else b.v))
    nx = x.v.shape[1]

    def back():
        g = out.g
        W.acc(g.T @ xin)
        if b is not None:
            b.acc(g.sum(axis=0))
        x.acc((g @ W.v)[:, :nx])
    tp.add(back)
    return out


def _act(name, z):
    """Value and derivative of an elementwise activation."""
    if name == "identity":
        return z, np.ones_like(z)
    if name == "tanh":
        y = np.tanh(z)
        return y, 1.0 - y * y
    if name == "relu":
        return np.maximum(z, 0.0), (z > 0).astype(z.dtype)
    if name == "sigmoid":
        s = 0.5 * (1.0 + np.tanh(0.5 * z))
        return s, s * (1.0 - s)
    if name == "softplus":
        s = 0.5 * (1.0 + np.tanh(0.5 * z))
        return np.logaddexp(0.0, z), s
    if name == "silu":
        s = 0.5 * (1.0 + np.tanh(0.5 * z))
        return z * s, s * (1.0 + z * (1.0 - s))
    raise ValueError(f"activation {name} not supported by the trainer")


def act(tp, z, name):
    y, dy = _act(name, z.v)
    out = V(y)

    def back():
        z.acc(out.g * dy)
    tp.add(back)
    return out


def lincomb(tp, base, terms):
    """base + sum(coef * node); coef a scalar or a (rows, 1) constant."""
    v = base.v.copy()
    for c, k in terms:
        v = v + c * k.v
    out = V(v)

    def back():
        base.acc(out.g)
        for c, k in terms:
            k.acc(c * out.g)
    tp.add(back)
    return out


def pad(tp, x, n):
    """Append n zero columns (augmented state)."""
    if n == 0:
        return x
    out = V(np.hstack([x.v, np.zeros((x.v.shape[0], n))]))
    w = x.v.shape[1]

    def back():
        x.acc(out.g[:, :w])
    tp.add(back)
    return out


def softmax(z):
    e = np.exp(z - z.max(axis=1, keepdims=True))
    return e / e.sum(axis=1, keepdims=True)


def xent_loss(tp, logits, labels):
    """Mean cross-entropy of softmax(logits) against integer labels."""
    p = softmax(logits.v)
    n = labels.size
    out = V(np.array(-np.mean(np.log(p[np.arange(n), labels] + 1e-300))))

    def back():
        g = p.copy()
        g[np.arange(n), labels] -= 1.0
        logits.acc(out.g * g / n)
    tp.add(back)
    return out


def mse_loss(tp, y, target):
    d = y.v - target
    out = V(np.array(np.mean(d * d)))

    def back():
        y.acc(out.g * 2.0 * d / d.size)
    tp.add(back)
    return out

# ---------------------------------------------------------------- blocks

class Dense:
    def __init__(self, name, n_in, n_out, act="identity", time=False):
        self.name, self.n_in, self.n_out, self.act, self.time = name, n_in, n_out, act, time


class Residual:
    def __init__(self, name, width, body):
        self.name, self.width, self.body = name, width, body


class Continuous:
    def __init__(self, name, width, t0, t1, field, solver, augment=0):
        self.name, self.width, self.t0, self.t1 = name, width, t0, t1
        self.field, self.solver, self.augment = field, solver, augment


def dense_layers(blocks):
    for b in blocks:
        if isinstance(b, Dense):
            yield b
        elif isinstance(b, Residual):
            yield from dense_layers(b.body)
        else:
            yield from dense_layers(b.field)


def init_params(blocks, rng, residual_scale=0.3):
    """Glorot-style normal weights; the last layer of a residual body and of a
    field start small so the block starts near identity / a slow flow."""
    P = {}

    def init(layers, last_scale):
        for i, L in enumerate(layers):
            if isinstance(L, Dense):
                n_in = L.n_in + (1 if L.time else 0)
                s = np.sqrt(2.0 / (n_in + L.n_out))
                if i == len(layers) - 1:
                    s *= last_scale
                P[L.name + ".weight"] = V(rng.normal(0.0, s, (L.n_out, n_in)))
                P[L.name + ".bias"] = V(np.zeros(L.n_out))
            elif isinstance(L, Residual):
                init(L.body, residual_scale)
            else:
                init(L.field, residual_scale)
    init(blocks, 1.0)
    return P


def parameter_count(P):
    return sum(p.v.size for p in P.values())


def run_layers(tp, layers, P, x, tcol=None):
    """Forward through a list of blocks; a softmax layer yields its logits."""
    for L in layers:
        if isinstance(L, Dense):
            z = affine(tp, x, P[L.name + ".weight"], P[L.name + ".bias"], tcol if L.time else None)
            x = z if L.act in ("identity", "softmax") else act(tp, z, L.act)
        elif isinstance(L, Residual):
            x = lincomb(tp, x, [(1.0, run_layers(tp, L.body, P, x, tcol))])
        else:
            x = run_continuous(tp, L, P, x)
    return x

# ---------------------------------------------------------------- tableaux

def _f(*xs):
    return [float(Fr(x)) for x in xs]


# c, a (rows), b, e (= b - b_hat), embedded order q, fsal
TABLEAUX = {
    "rk4": dict(c=_f(0, "1/2", "1/2", 1), a=[[], _f("1/2"), _f(0, "1/2"), _f(0, 0, 1)],
                b=_f("1/6", "1/3", "1/3", "1/6")),
    "heun": dict(c=_f(0, 1), a=[[], _f(1)], b=_f("1/2", "1/2")),
    "bogacki-shampine": dict(
        c=_f(0, "1/2", "3/4", 1),
        a=[[], _f("1/2"), _f(0, "3/4"), _f("2/9", "1/3", "4/9")],
        b=_f("2/9", "1/3", "4/9", 0),
        bhat=_f("7/24", "1/4", "1/3", "1/8"), q=2, fsal=True),
    "dormand-prince": dict(
        c=_f(0, "1/5", "3/10", "4/5", "8/9", 1, 1),
        a=[[], _f("1/5"), _f("3/40", "9/40"), _f("44/45", "-56/15", "32/9"),
           _f("19372/6561", "-25360/2187", "64448/6561", "-212/729"),
           _f("9017/3168", "-355/33", "46732/5247", "49/176", "-5103/18656"),
           _f("35/384", 0, "500/1113", "125/192", "-2187/6784", "11/84")],
        b=_f("35/384", 0, "500/1113", "125/192", "-2187/6784", "11/84", 0),
        bhat=_f("5179/57600", 0, "7571/16695", "393/640", "-92097/339200", "187/2100", "1/40"),
        q=4, fsal=True),
}
for _t in TABLEAUX.values():
    if "bhat" in _t:
        _t["e"] = [float(Fr(x) - Fr(y)) for x, y in zip(_t["b"], _t["bhat"])]


def rk_step(tp, f, tab, t, h, y):
    """One step of the propagated solution from (t, y) with step h (scalar or
    (rows, 1)); stages whose weight b is zero are skipped (the FSAL stage)."""
    K = []
    n = max(i for i, bi in enumerate(tab["b"]) if bi != 0.0) + 1
    for i in range(n):
        yi = y if i == 0 else lincomb(tp, y, [(h * a, K[j]) for j, a in enumerate(tab["a"][i]) if a != 0.0])
        K.append(f(t + tab["c"][i] * h, yi))
    return lincomb(tp, y, [(h * bi, K[i]) for i, bi in enumerate(tab["b"][:n]) if bi != 0.0])


def _rms(x):
    return np.sqrt(np.mean(x * x, axis=1))


def adaptive_plan(f, tab, s, t0, t1, y0):
    """Untaped adaptive integration of every row, exactly per DEVELOPERS.md
    (integral controller). f(tcol, y) -> dy on plain arrays.
    Returns y(t1), per-row status, attempts, the per-iteration arrays (t, h)
    of accepted steps (h = 0 where a row did not accept), and per row the
    smallest |err - 1| of its attempts (how near a decision came to flipping)."""
    rtol, atol, max_steps = s["rtol"], s["atol"], s["max_steps"]
    safety, min_f, max_f = 0.9, 0.2, 10.0
    q = tab["q"]
    B = y0.shape[0]
    d = 1.0 if t1 > t0 else -1.0
    col = lambda v: v[:, None]
    y = y0.copy()
    t = np.full(B, float(t0))
    f0 = f(col(t), y)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if s.get("first_step"):
            habs = np.full(B, float(s["first_step"]))
        else:
            sc = atol + np.abs(y0) * rtol
            d0, d1 = _rms(y0 / sc), _rms(f0 / sc)
            h0 = np.where((d0 < 1e-5) | (d1 < 1e-5), 1e-6, 0.01 * d0 / d1)
            f1 = f(col(t + d * h0), y0 + d * col(h0) * f0)
            d2 = _rms((f1 - f0) / sc) / h0
            m = np.maximum(d1, d2)
            h1 = np.where(m <= 1e-15, np.maximum(1e-6, h0 * 1e-3), (0.01 / m) ** (1.0 / (q + 1)))
            habs = np.minimum(100.0 * h0, h1)
    status = np.array(["running"] * B, dtype=object)
    attempts = np.zeros(B, dtype=int)
    rejected_here = np.zeros(B, dtype=bool)
    margin = np.full(B, np.inf)   # smallest |err - 1| over a row's attempts
    plan = []
    while True:
        run = (status == "running") & (t != t1)
        status[(status == "running") & (t == t1)] = "ok"
        lim = run & (attempts == max_steps)
        status[lim] = "step_limit"
        run &= ~lim
        small = run & (habs < 10.0 * np.abs(np.nextafter(t, d * np.inf) - t))
        status[small] = "step_too_small"
        run &= ~small
        if not run.any():
            break
        t_new = t + d * habs
        t_new = np.where(d * (t_new - t1) > 0, t1, t_new)
        h = np.where(run, t_new - t, 0.0)
        hc = col(h)
        K = [f0]
        for i in range(1, len(tab["c"])):
            yi = y + hc * sum(a * K[j] for j, a in enumerate(tab["a"][i]) if a != 0.0)
            K.append(f(col(t + tab["c"][i] * h), yi))
        y_new = y + hc * sum(b * K[i] for i, b in enumerate(tab["b"]) if b != 0.0)
        K[-1] = f(col(t_new), y_new)  # FSAL stage at (t_new, y_new)
        e = hc * sum(E * K[i] for i, E in enumerate(tab["e"]) if E != 0.0)
        sc = atol + rtol * np.maximum(np.abs(y), np.abs(y_new))
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            err = _rms(e / sc)
            acc = run & (err < 1.0)
            fac_acc = np.where(err == 0.0, max_f, np.minimum(max_f, safety * err ** (-1.0 / (q + 1))))
            fac_acc = np.where(rejected_here, np.minimum(1.0, fac_acc), fac_acc)
            fac_rej = np.maximum(min_f, safety * err ** (-1.0 / (q + 1)))
        attempts += run
        margin = np.where(run, np.minimum(margin, np.abs(err - 1.0)), margin)
        rej = run & ~acc
        bad = acc & ~np.all(np.isfinite(y_new), axis=1)
        status[bad] = "state_not_finite"
        acc &= ~bad
        plan.append((t.copy(), np.where(acc, h, 0.0)))
        habs = np.where(acc, habs * fac_acc, np.where(rej, habs * fac_rej, habs))
        rejected_here = np.where(acc, False, rejected_here | rej)
        t = np.where(acc, t_new, t)
        y = np.where(col(acc), y_new, y)
        f0 = np.where(col(acc), K[-1], f0)
    return y, status, attempts, plan, margin


# block name -> (status, attempts, accepted steps, smallest |err - 1|), per row, of the last adaptive pass
STATS = {}


def run_continuous(tp, C, P, x):
    y = pad(tp, x, C.augment)
    s = C.solver
    tab = TABLEAUX[s["method"]]

    def f(tcol, yv):
        return run_layers(tp, C.field, P, yv, tcol)
    B = y.v.shape[0]
    if "steps" in s:
        N = s["steps"]
        h = (C.t1 - C.t0) / N
        for i in range(N):
            y = rk_step(tp, lambda t, yy: f(np.full((B, 1), t), yy), tab, C.t0 + i * h, h, y)
        return y
    untaped = Tape(record=False)
    yend, status, attempts, plan, margin = adaptive_plan(
        lambda tcol, yv: run_layers(untaped, C.field, P, V(yv), tcol).v, tab, s, C.t0, C.t1, y.v)
    accepted = np.sum([h != 0.0 for _, h in plan], axis=0)
    STATS[C.name] = (status, attempts, accepted, margin)
    if not tp.record:
        return V(yend)
    for t, h in plan:
        if np.any(h != 0.0):
            y = rk_step(tp, f, tab, t[:, None], h[:, None], y)
    return y


# ---------------------------------------------------------------- training

def adam(P, lr, state, b1=0.9, b2=0.999, eps=1e-8, clip=5.0):
    state["t"] = state.get("t", 0) + 1
    t = state["t"]
    gn = np.sqrt(sum(float(np.sum(p.g * p.g)) for p in P.values() if p.g is not None))
    scale = min(1.0, clip / (gn + 1e-12))
    for k, p in P.items():
        if p.g is None:
            continue
        g = p.g * scale
        m, v = state.get(k, (np.zeros_like(g), np.zeros_like(g)))
        m = b1 * m + (1 - b1) * g
        v = b2 * v + (1 - b2) * g * g
        state[k] = (m, v)
        p.v = p.v - lr * (m / (1 - b1 ** t)) / (np.sqrt(v / (1 - b2 ** t)) + eps)
        p.g = None


def predict(blocks, P, x):
    """Float64 forward pass of the whole model (softmax applied if the last layer has it)."""
    out = run_layers(Tape(record=False), blocks, P, V(np.asarray(x, dtype=np.float64)))
    last = blocks[-1]
    return softmax(out.v) if isinstance(last, Dense) and last.act == "softmax" else out.v


def predict_scaled(blocks, P, x, scaling):
    """predict on raw values: standardised first and restored after when `scaling` is given."""
    if scaling is None:
        return predict(blocks, P, x)
    sc = {k: v.astype(np.float64) for k, v in scaling.items()}
    return predict(blocks, P, (np.asarray(x, dtype=np.float64) - sc["x_mean"]) / sc["x_std"]) * sc["y_std"] + sc["y_mean"]


def fold_input_scaling(blocks, P, mu, sigma):
    """The trainer sees (x - mu) / sigma; fold that into the first dense layer
    so the deployed model reads the sensor values as they are."""
    L = blocks[0]
    W, b = P[L.name + ".weight"].v, P[L.name + ".bias"].v
    Wf = W / sigma[None, :]
    P[L.name + ".weight"].v = Wf
    P[L.name + ".bias"].v = b - Wf @ mu


def fold_output_scaling(blocks, P, mu, sigma):
    """The trainer predicts (y - mu) / sigma; fold the inverse into the last dense layer."""
    L = blocks[-1]
    W, b = P[L.name + ".weight"].v, P[L.name + ".bias"].v
    P[L.name + ".weight"].v = sigma[:, None] * W
    P[L.name + ".bias"].v = sigma * b + mu


def to_float32(P):
    """Round every tensor to float32 (what the .npz stores) and back to float64,
    so evaluation and expected outputs use exactly the deployed weights."""
    for p in P.values():
        p.v = p.v.astype(np.float32).astype(np.float64)


def pick_rows(n, attempts, accepted, margin, min_margin=0.05):
    """Indices of n held-out rows for inputs.csv: rows whose every accept or
    reject decision has |err - 1| >= min_margin (so float32 code takes the
    same steps as the double reference), those with a rejected attempt first."""
    robust = margin >= min_margin
    rej = np.flatnonzero(robust & (attempts > accepted))
    plain = np.flatnonzero(robust & (attempts == accepted))
    return np.concatenate([rej[:n // 2], plain])[:n]


def write_safetensors(path, arrays):
    """A safetensors file by its published layout (huggingface/safetensors,
    README "Format"): an 8-byte little-endian header length, a JSON header of
    name -> dtype, shape and [begin, end) data offsets (padded with spaces to a
    multiple of 8 bytes), then the tensors' little-endian bytes, in name order."""
    header, data, at = {}, [], 0
    for k in sorted(arrays):
        a = np.ascontiguousarray(arrays[k], dtype="<f4")
        header[k] = {"dtype": "F32", "shape": list(a.shape), "data_offsets": [at, at + a.nbytes]}
        data.append(a.tobytes())
        at += a.nbytes
    text = json.dumps(header, separators=(",", ":")).encode()
    text += b" " * (-len(text) % 8)
    with open(path, "wb") as fh:
        fh.write(struct.pack("<Q", len(text)) + text + b"".join(data))


def save_sample(name, blocks, P, x_rows, in_names, out_names, folder, weights="npz", scaling=None):
    """Writes <name>.npz (or <name>.safetensors with weights="safetensors"),
    inputs.csv and expected.csv into `folder`. With `scaling` (a dict of
    float32 arrays x_mean, x_std, y_mean, y_std) the network works on
    standardised values: they go into the weights file beside the weights, and
    expected.csv is (network((x - x_mean) / x_std)) * y_std + y_mean."""
    arrays = {k: P[k].v.astype(np.float32) for k in sorted(P)}
    if scaling is not None:
        arrays.update({k: v.astype(np.float32) for k, v in scaling.items()})
    if weights == "safetensors":
        write_safetensors(os.path.join(folder, name + ".safetensors"), arrays)
    else:
        np.savez(os.path.join(folder, name + ".npz"), **arrays)
    x_rows = np.array([[float(f"{v:.6g}") for v in r] for r in x_rows])
    y = predict_scaled(blocks, P, x_rows, scaling)
    with open(os.path.join(folder, "inputs.csv"), "w") as fh:
        fh.write(",".join(in_names) + "\n")
        for r in x_rows:
            fh.write(",".join(repr(float(v)) for v in r) + "\n")
    with open(os.path.join(folder, "expected.csv"), "w") as fh:
        fh.write(",".join(out_names) + "\n")
        for r in y:
            fh.write(",".join(f"{v:.17g}" for v in r) + "\n")
    return x_rows, y


def standardise(train, *others):
    """Column means and standard deviations of `train`, and `train` and each
    of `others` scaled by them (the trainer works on standardised values)."""
    mu, sd = train.mean(axis=0), train.std(axis=0)
    return mu, sd, [(a - mu) / sd for a in (train,) + others]


def fit(blocks, P, rng, z, target, loss_fn, epochs, lr0, report, batch=128, block=None):
    """Adam over shuffled mini-batches with a cosine learning-rate schedule from
    lr0 down to 1e-4. report(epoch, mean train loss, most attempts) runs every
    tenth epoch and after the last. With `block` (the name of an adaptive
    continuous block) every batch must integrate to "ok", and the most attempts
    of any row in the epoch are tracked."""
    print(f"parameters: {parameter_count(P)}")
    state = {}
    steps_per_epoch = len(z) // batch
    for ep in range(epochs):
        lr = lr0 * 0.5 * (1.0 + np.cos(np.pi * ep / epochs)) + 1e-4
        perm = rng.permutation(len(z))
        tot, most = 0.0, 0
        for k in range(steps_per_epoch):
            idx = perm[k * batch:(k + 1) * batch]
            tp = Tape()
            out = run_layers(tp, blocks, P, V(z[idx]))
            if block is not None:
                status, attempts, _, _ = STATS[block]
                assert np.all(status == "ok"), "training hit a solver limit"
                most = max(most, int(attempts.max()))
            loss = loss_fn(tp, out, target[idx])
            tp.backward(loss)
            adam(P, lr, state)
            tot += float(loss.v)
        if ep % 10 == 9 or ep == epochs - 1:
            report(ep, tot / steps_per_epoch, most)


def adaptive_regression_sample(name, blocks, block, seed, make_data, sizes, epochs, lr0,
                               rmse_text, held_out, in_names, out_names, folder, weights="npz", fold=True):
    """The whole run of a regression sample with one adaptive continuous block
    named `block`: data from make_data(rng, n) for sizes = (train, held out),
    standardised inputs and targets, mean squared error, scaling folded into
    the first and last layers (or, with fold=False, stored in the weights
    file as x_mean, x_std, y_mean, y_std for the description's 'standardised'),
    float32 weights, then 40 held-out rows whose
    every solver decision has |err - 1| >= 0.05 written out with save_sample.
    rmse_text(rmse) words the per-output RMSE of the epoch lines;
    held_out(err, rmse, y) prints the sample's own summary of the final weights
    on the held-out cases (err = prediction - y, rmse per output)."""
    rng = np.random.default_rng(seed)
    x_tr, y_tr = make_data(rng, sizes[0])
    x_te, y_te = make_data(rng, sizes[1])
    mu, sd, (z_tr, z_te) = standardise(x_tr, x_te)
    ymu, ysd, (t_tr,) = standardise(y_tr)
    P = init_params(blocks, rng)

    def report(ep, loss, most):
        pred = predict(blocks, P, z_te) * ysd + ymu
        rmse = np.sqrt(np.mean((pred - y_te) ** 2, axis=0))
        print(f"epoch {ep + 1:3d}  train loss {loss:.5f}  most attempts {most}"
              f"  held-out RMSE {rmse_text(rmse)}")
    fit(blocks, P, rng, z_tr, t_tr, mse_loss, epochs, lr0, report, block=block)
    scaling = None
    if fold:
        fold_input_scaling(blocks, P, mu, sd)
        fold_output_scaling(blocks, P, ymu, ysd)
    else:
        # The description states the standardisation ('standardised' on input and output).
        scaling = {"x_mean": mu.astype(np.float32), "x_std": sd.astype(np.float32),
                   "y_mean": ymu.astype(np.float32), "y_std": ysd.astype(np.float32)}
    to_float32(P)
    err = predict_scaled(blocks, P, x_te, scaling) - y_te
    held_out(err, np.sqrt(np.mean(err ** 2, axis=0)), y_te)
    status, attempts, accepted, margin = STATS[block]
    max_steps = next(b for b in blocks if isinstance(b, Continuous) and b.name == block).solver["max_steps"]
    print(f"solver: all ok {bool(np.all(status == 'ok'))}; attempts per inference min {attempts.min()},"
          f" max {attempts.max()}, mean {attempts.mean():.2f},"
          f" rejected in total {int(np.sum(attempts - accepted))} (max-steps {max_steps})")
    order = pick_rows(40, attempts, accepted, margin)
    save_sample(name, blocks, P, x_te[order[:40]], in_names, out_names, folder, weights, scaling)
    status, attempts, accepted, margin = STATS[block]
    print(f"inputs.csv rows: attempts min {attempts.min()}, max {attempts.max()},"
          f" rows with a rejection {int(np.sum(attempts > accepted))},"
          f" smallest |err - 1| {margin.min():.3g}")
