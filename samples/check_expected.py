"""Cross-checks every sample's expected.csv; run with /usr/bin/python3.

    /usr/bin/python3 samples/check_expected.py [--meander BIN] [SAMPLE...]

For each samples/<name>/ it reads <name>.mnd with its own small parser, loads
the tensors the description names from its weights file (.npz), runs an
independent float64 forward pass on inputs.csv and compares with
expected.csv (a standardised input is (x - mean) / scale before the first
layer, a standardised output y * scale + mean after the last). It shares no
code with the trainers (samples/trainlib.py):
continuous blocks with an adaptive method are integrated by SciPy 1.10's
solve_ivp (RK45 = dormand-prince, RK23 = bogacki-shampine), whose step
control is the one DEVELOPERS.md "Integrator semantics" specifies; fixed-step
methods use t_i = t0 + i*h with the Butcher tableaux written out below.

A streaming model (one with a `state` statement) reads inputs.csv as a
sequence file (sequence id, time stamp, observation); per row the state
evolves over the gap since the previous row of its sequence (fixed-step
methods: ceil(gap * steps-per-unit) steps; adaptive: solve_ivp), then a GRU
cell written out after PyTorch's GRUCell documentation updates it (or a
dense merge) with the observation (standardised first when the input is),
then the readout (its units restored when the output is standardised); the
state is zero where a sequence begins.

With --meander BIN it also runs `BIN eval <name>.mnd --input inputs.csv` and
compares the numbers it prints (one row of outputs per input row) with
expected.csv; and, for integer weight storage, quantises every weight matrix of
16 or more weights here, row by row as grammar/LANGUAGE.md "Weight storage"
states it (scale max|w| / 127 or / 32767, q rounded to nearest with ties away
from zero, the weight taken as q * scale), runs the same forward pass and
compares it with `BIN eval ... --weights-as int8` (and int16).

Exit status 0 when every comparison is within tolerance, 1 otherwise.
"""
import json
import math
import os
import re
import struct
import subprocess
import sys
from fractions import Fraction

import numpy as np
from scipy.integrate import solve_ivp

HERE = os.path.dirname(os.path.abspath(__file__))
TOL = 1e-9          # |difference| <= TOL * max(1, |expected|)

# ---------------------------------------------------------------- parsing

TOKEN = re.compile(r'\s+|#[^\n]*|"(?P<str>[^"\n]*)"|(?P<arrow>->)'
                   r'|(?P<num>[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)'
                   r'|(?P<word>[A-Za-z_][A-Za-z0-9_]*(?:-[A-Za-z][A-Za-z0-9_]*)*)'
                   r'|(?P<punct>[:,+\[\]{}])')


def tokenize(text):
    out, pos = [], 0
    while pos < len(text):
        m = TOKEN.match(text, pos)
        if not m:
            raise SyntaxError(f"unexpected character {text[pos]!r} at offset {pos}")
        pos = m.end()
        for kind in ("str", "arrow", "num", "word", "punct"):
            if m.group(kind) is not None:
                out.append((kind, m.group(kind)))
    return out


class Parser:
    ACTIVATIONS = {"identity", "relu", "leaky-relu", "tanh", "sigmoid", "softplus", "silu",
                   "gelu", "elu", "softmax"}

    def __init__(self, text):
        self.toks = tokenize(text)
        self.i = 0

    def peek(self):
        return self.toks[self.i][1] if self.i < len(self.toks) else None

    def take(self, want=None):
        kind, val = self.toks[self.i]
        if want is not None and val != want:
            raise SyntaxError(f"expected {want!r}, found {val!r}")
        self.i += 1
        return val

    def number(self):
        return float(self.take())

    def model(self):
        m = {}
        self.take("model")
        m["name"] = self.take()
        self.take("weights")
        m["weights"] = self.take()
        self.take("input")
        m["input"] = (self.take(), self.size())
        m["input_options"] = self.vector_options()
        m["state"] = None
        if self.peek() == "state":
            self.take()
            name, size = self.take(), self.size()
            self.take(",")
            self.take("largest-gap")
            m["state"] = dict(name=name, size=size, largest_gap=self.number())
        m["blocks"] = []
        while self.peek() != "output":
            m["blocks"].append(self.block())
        self.take("output")
        m["output"] = (self.take(), self.size())
        m["output_options"] = self.vector_options()
        return m

    def vector_options(self):
        """The options of an input or output statement: names [a in "unit", ...],
        classes [...], standardised mean M scale S (M, S: a tensor name or [numbers])."""
        o = {}
        while self.peek() == ",":
            self.take(",")
            kw = self.take()
            if kw in ("names", "classes"):
                self.take("[")
                items = []
                while True:
                    item = [self.take(), ""]
                    if self.peek() == "in":
                        self.take("in")
                        item[1] = self.take()
                    items.append(item)
                    if self.peek() != ",":
                        break
                    self.take(",")
                self.take("]")
                o[kw] = items
            elif kw == "standardised":
                for part in ("mean", "scale"):
                    self.take(part)
                    if self.peek() == "[":
                        self.take("[")
                        vals = [self.number()]
                        while self.peek() == ",":
                            self.take(",")
                            vals.append(self.number())
                        self.take("]")
                        o[part] = np.array(vals)
                    else:
                        o[part] = self.take()       # a tensor name
            else:
                raise SyntaxError(f"unknown option {kw!r} of input or output")
        return o

    def size(self):
        self.take("[")
        n = int(self.take())
        self.take("]")
        return n

    def block(self):
        kw = self.peek()
        if kw == "dense":
            return self.dense()
        if kw == "residual":
            self.take()
            name = self.take()
            self.take(":")
            width = int(self.take())
            self.take("{")
            body = []
            while self.peek() != "}":
                body.append(self.block())
            self.take("}")
            return dict(kind="residual", name=name, width=width, body=body)
        if kw == "continuous":
            return self.continuous()
        if kw == "gated":
            self.take()
            g = dict(kind="gated", name=self.take())
            self.take(":")
            g["in"] = int(self.take())
            self.take("->")
            g["out"] = int(self.take())
            g["prefix"] = g["name"]
            if self.peek() == ",":
                self.take(",")
                self.take("from")
                g["prefix"] = self.take()
            return g
        raise SyntaxError(f"unexpected {kw!r}")

    def dense(self):
        self.take("dense")
        d = dict(kind="dense", name=self.take(), act="identity", param=None, bias=True)
        self.take(":")
        d["in"] = int(self.take())
        d["time"] = False
        if self.peek() == "+":
            self.take("+")
            self.take("t")
            d["time"] = True
        self.take("->")
        d["out"] = int(self.take())
        d["weight_t"], d["bias_t"] = d["name"] + ".weight", d["name"] + ".bias"
        while self.peek() == ",":
            self.take(",")
            opt = self.take()
            if opt in self.ACTIVATIONS:
                d["act"] = opt
                if opt in ("leaky-relu", "elu") and self.toks[self.i][0] == "num":
                    d["param"] = self.number()
            elif opt == "weight":
                d["weight_t"] = self.take()
            elif opt == "bias":
                d["bias_t"] = self.take()
            elif opt == "from":
                prefix = self.take()
                d["weight_t"], d["bias_t"] = prefix + ".weight", prefix + ".bias"
            elif opt == "no-bias":
                d["bias"] = False
            else:
                raise SyntaxError(f"unknown dense option {opt!r}")
        if d["param"] is None:
            d["param"] = 0.01 if d["act"] == "leaky-relu" else 1.0
        return d

    def continuous(self):
        self.take("continuous")
        c = dict(kind="continuous", name=self.take(), augment=0, field=[], trained=None)
        self.take(":")
        c["width"] = int(self.take())
        self.take(",")
        self.take("t")
        self.take("in")
        self.take("[")
        c["t0"] = self.number()
        self.take(",")
        c["t1"] = self.take() if self.peek() == "gap" else self.number()
        self.take("]")
        self.take("{")
        if self.peek() == "augment":
            self.take()
            c["augment"] = int(self.take())
        while self.peek() != "}":
            kw = self.peek()
            if kw in ("solver", "trained-with"):
                self.take()
                s = dict(method=self.take())
                while self.peek() == ",":
                    self.take(",")
                    key = self.take()
                    s[key] = self.take() if key == "controller" else self.number()
                c["solver" if kw == "solver" else "trained"] = s
            else:
                c["field"].append(self.block())
        self.take("}")
        return c

# ---------------------------------------------------------------- forward pass

def act(name, z, param):
    if name in ("identity", "softmax"):
        return z
    if name == "relu":
        return np.maximum(z, 0.0)
    if name == "leaky-relu":
        return np.where(z >= 0.0, z, param * z)
    if name == "tanh":
        return np.tanh(z)
    if name == "sigmoid":
        e = np.exp(-np.abs(z))      # never overflows
        return np.where(z >= 0.0, 1.0 / (1.0 + e), e / (1.0 + e))
    if name == "softplus":
        return np.maximum(z, 0.0) + np.log1p(np.exp(-np.abs(z)))
    if name == "silu":
        return z / (1.0 + np.exp(-z))
    if name == "gelu":
        return 0.5 * z * (1.0 + np.tanh(np.sqrt(2.0 / np.pi) * (z + 0.044715 * z ** 3)))
    if name == "elu":
        return np.where(z > 0.0, z, param * np.expm1(np.minimum(z, 0.0)))
    raise ValueError(name)


def fr(*xs):
    return [float(Fraction(x)) for x in xs]


# Fixed-step tableaux (c, a rows, b): Euler; explicit midpoint; Heun; classic
# RK4 (Kutta 1901); 3/8 rule. HNW I, II.1.
FIXED = {
    "euler": (fr(0), [[]], fr(1)),
    "midpoint": (fr(0, "1/2"), [[], fr("1/2")], fr(0, 1)),
    "heun": (fr(0, 1), [[], fr(1)], fr("1/2", "1/2")),
    "rk4": (fr(0, "1/2", "1/2", 1), [[], fr("1/2"), fr(0, "1/2"), fr(0, 0, 1)],
            fr("1/6", "1/3", "1/3", "1/6")),
    "rk38": (fr(0, "1/3", "2/3", 1), [[], fr("1/3"), fr("-1/3", 1), fr(1, -1, 1)],
             fr("1/8", "3/8", "3/8", "1/8")),
}
# SciPy's solvers for the adaptive methods, and the field evaluations one
# attempt costs after the first (FSAL).
SCIPY = {"dormand-prince": ("RK45", 6), "bogacki-shampine": ("RK23", 3)}


def read_tensors(path):
    """The weights file's tensors as float64 arrays: .npz through NumPy, a
    torch.save checkpoint through torch.load, safetensors by its published
    layout (8-byte little-endian header length, JSON header, raw data)."""
    if path.endswith(".npz"):
        with np.load(path) as z:
            return {k: z[k].astype(np.float64) for k in z.files}
    if path.endswith((".pt", ".pth")):
        import torch
        return {k: v.double().numpy() for k, v in torch.load(path).items()}
    if path.endswith(".safetensors"):
        with open(path, "rb") as fh:
            raw = fh.read()
        n = struct.unpack("<Q", raw[:8])[0]
        header = json.loads(raw[8:8 + n])
        types = {"F32": "<f4", "F64": "<f8"}
        out = {}
        for k, t in header.items():
            if k == "__metadata__":
                continue
            b, e = t["data_offsets"]
            a = np.frombuffer(raw[8 + n + b:8 + n + e], dtype=types[t["dtype"]])
            out[k] = a.reshape(t["shape"]).astype(np.float64)
        return out
    raise ValueError(f"{path}: no reader for this weights file here")


def quantised(w, top):
    """Row by row: q = round(w / s), ties away from zero, s = max|w| / top; returns q * s."""
    out = np.zeros_like(w)
    for j, row in enumerate(w):
        s = np.max(np.abs(row)) / top
        if s == 0:
            continue
        x = row / s
        q = np.clip(np.where(x >= 0, np.floor(x + 0.5), -np.floor(-x + 0.5)), -top, top)
        out[j] = q * s
    return out


class Model:
    def __init__(self, mnd_path, top=None):
        with open(mnd_path) as fh:
            self.m = Parser(fh.read()).model()
        wpath = os.path.join(os.path.dirname(mnd_path), self.m["weights"])
        self.tensors = read_tensors(wpath)
        if top:
            for k, t in self.tensors.items():
                if t.ndim == 2 and t.size >= 16:
                    self.tensors[k] = quantised(t, top)
        self.used = set()
        self.attempts = {}

    def tensor(self, name, shape):
        t = self.tensors[name]
        if t.shape != shape:
            raise ValueError(f"tensor {name}: shape {t.shape}, description needs {shape}")
        self.used.add(name)
        return t

    def dense(self, d, x, t):
        W = self.tensor(d["weight_t"], (d["out"], d["in"] + (1 if d["time"] else 0)))
        xin = np.append(x, t) if d["time"] else x
        z = W @ xin
        if d["bias"]:
            z = z + self.tensor(d["bias_t"], (d["out"],))
        return act(d["act"], z, d["param"])

    def seq(self, blocks, x, t=None):
        for b in blocks:
            if b["kind"] == "dense":
                x = self.dense(b, x, t)
            elif b["kind"] == "residual":
                x = x + self.seq(b["body"], x, t)
            else:
                x = self.continuous(b, x)
        return x

    def gated(self, g, x, h):
        # PyTorch GRUCell: rows of the weights in gate order r, z, n.
        n_h = g["out"]
        w_ih = self.tensor(g["prefix"] + ".weight_ih", (3 * n_h, g["in"]))
        w_hh = self.tensor(g["prefix"] + ".weight_hh", (3 * n_h, n_h))
        gi = w_ih @ x + self.tensor(g["prefix"] + ".bias_ih", (3 * n_h,))
        gh = w_hh @ h + self.tensor(g["prefix"] + ".bias_hh", (3 * n_h,))
        r = act("sigmoid", gi[:n_h] + gh[:n_h], 0)
        z = act("sigmoid", gi[n_h:2 * n_h] + gh[n_h:2 * n_h], 0)
        n = np.tanh(gi[2 * n_h:] + r * gh[2 * n_h:])
        return (1 - z) * n + z * h

    def sequences(self, rows):
        """A streaming model over sequence rows (id, time, values...): one output per row."""
        evolve, update, readout = self.m["blocks"][0], self.m["blocks"][1], self.m["blocks"][2:]
        sx = self.scaling(self.m["input_options"], self.m["input"][1])
        sy = self.scaling(self.m["output_options"], self.m["output"][1])
        out, h, prev = [], None, None
        for seq_id, t, x in rows:
            x = np.asarray(x, dtype=np.float64)
            if sx is not None:          # the cell reads the standardised observation
                x = (x - sx[0]) / sx[1]
            if prev is None or seq_id != prev[0]:
                h, gap = np.zeros(self.m["state"]["size"]), 0.0
            else:
                gap = t - prev[1]
            prev = (seq_id, t)
            if gap > 0:
                h = self.continuous(evolve, h, gap)
            if update["kind"] == "gated":
                h = self.gated(update, x, h)
            else:
                raise ValueError(f"update {update['kind']} is not handled here")
            y = self.seq(readout, h)
            out.append(y if sy is None else y * sy[1] + sy[0])
        return np.array(out)

    def continuous(self, c, x, gap=None):
        y0 = np.concatenate([x, np.zeros(c["augment"])])
        s = c["solver"]
        if c["trained"] is not None and c["trained"] != s:
            raise ValueError(f"block {c['name']}: solver {s} differs from trained-with {c['trained']}")
        f = lambda t, y: self.seq(c["field"], y, t)  # noqa: E731
        t0, t1 = c["t0"], (gap if c["t1"] == "gap" else c["t1"])
        if s["method"] in FIXED:
            cc, a, b = FIXED[s["method"]]
            n = int(s["steps"]) if "steps" in s else max(1, math.ceil(gap * s["steps-per-unit"]))
            h = (t1 - t0) / n
            y = y0
            for i in range(n):
                ti = t0 + i * h
                k = []
                for j in range(len(cc)):
                    yj = y + h * sum(a[j][m] * k[m] for m in range(j)) if j else y
                    k.append(f(ti + cc[j] * h, yj))
                y = y + h * sum(bj * kj for bj, kj in zip(b, k))
            return y
        method, per_attempt = SCIPY[s["method"]]
        for key, default in (("safety", 0.9), ("min-factor", 0.2), ("max-factor", 10.0)):
            if s.get(key, default) != default:
                raise ValueError(f"{key} {s[key]}: SciPy's {method} has {default} built in")
        if s.get("controller", "integral") != "integral":
            raise ValueError("SciPy's solvers have the integral controller only")
        kw = dict(first_step=s["first-step"]) if "first-step" in s else {}
        sol = solve_ivp(f, (t0, t1), y0, method=method, rtol=s["rtol"], atol=s["atol"], **kw)
        if sol.status != 0:
            raise RuntimeError(f"block {c['name']}: solve_ivp failed: {sol.message}")
        attempts = (sol.nfev - 1 - (0 if kw else 1)) // per_attempt
        if attempts > s["max-steps"]:
            raise RuntimeError(f"block {c['name']}: {attempts} attempts exceed max-steps {s['max-steps']:g}")
        self.attempts.setdefault(c["name"], []).append(attempts)
        return sol.y[:, -1]

    def scaling(self, options, n):
        """(mean, scale) of a standardised input or output, or None."""
        if "mean" not in options:
            return None
        return tuple(self.tensor(options[k], (n,)) if isinstance(options[k], str) else options[k]
                     for k in ("mean", "scale"))

    def __call__(self, x):
        x = np.asarray(x, dtype=np.float64)
        sx = self.scaling(self.m["input_options"], self.m["input"][1])
        if sx is not None:
            x = (x - sx[0]) / sx[1]
        y = self.seq(self.m["blocks"], x)
        last = self.m["blocks"][-1]
        if last["kind"] == "dense" and last["act"] == "softmax":
            e = np.exp(y - np.max(y))
            y = e / np.sum(e)
        sy = self.scaling(self.m["output_options"], self.m["output"][1])
        if sy is not None:
            y = y * sy[1] + sy[0]
        return y

# ---------------------------------------------------------------- comparison

def read_csv(path):
    with open(path) as fh:
        lines = [ln.strip() for ln in fh if ln.strip()]
    return lines[0].split(","), np.array([[float(v) for v in ln.split(",")] for ln in lines[1:]])


def read_sequence_csv(path):
    """A sequence file with a header: (id, time, [values]) per row."""
    with open(path) as fh:
        lines = [ln.strip() for ln in fh if ln.strip() and not ln.startswith("#")]
    rows = []
    for ln in lines[1:]:
        parts = ln.split(",")
        rows.append((parts[0].strip(), float(parts[1]), [float(v) for v in parts[2:]]))
    return lines[0].split(","), rows


def numeric_rows(text):
    rows = []
    for ln in text.splitlines():
        parts = [p.strip() for p in re.split(r"[,\s]+", ln.strip()) if p.strip()]
        try:
            rows.append([float(p) for p in parts])
        except ValueError:
            continue        # a header or a status line
    return np.array([r for r in rows if r])


def compare(what, got, want):
    if got.shape != want.shape:
        print(f"  {what}: shape {got.shape}, expected {want.shape}: FAIL")
        return False
    d = np.abs(got - want)
    worst = float(np.max(d / np.maximum(1.0, np.abs(want))))
    ok = worst <= TOL
    print(f"  {what}: largest |difference| {float(np.max(d)):.3g}, relative to max(1,|expected|) "
          f"{worst:.3g}: {'ok' if ok else 'FAIL'}")
    return ok


def check(name, meander=None):
    folder = os.path.join(HERE, name)
    mnd = os.path.join(folder, name + ".mnd")
    model = Model(mnd)
    m = model.m
    out_names, want = read_csv(os.path.join(folder, "expected.csv"))
    if m["state"]:
        in_names, rows = read_sequence_csv(os.path.join(folder, "inputs.csv"))
        in_names, x = in_names[2:], rows
        got = model.sequences(rows)
    else:
        in_names, x = read_csv(os.path.join(folder, "inputs.csv"))
        got = None
    print(f"{name}: {len(x)} rows, {m['input'][1]} inputs, {m['output'][1]} outputs")
    ok = len(in_names) == m["input"][1] and len(out_names) == m["output"][1]
    if not ok:
        print("  header widths do not match the description: FAIL")
    if got is None:
        got = np.array([model(r) for r in x])
    unused = sorted(set(model.tensors) - model.used)
    if unused:
        print(f"  tensors not named by the description: {unused}: FAIL")
        ok = False
    for blk, att in model.attempts.items():
        print(f"  {blk}: solve_ivp attempts per row {min(att)}..{max(att)}")
    ok &= compare("independent forward pass vs expected.csv", got, want)
    if meander:
        r = subprocess.run([meander, "eval", mnd, "--input", os.path.join(folder, "inputs.csv")],
                           capture_output=True, text=True, cwd=folder)
        if r.returncode != 0:
            print(f"  meander eval exited {r.returncode}: {r.stderr.strip()}: FAIL")
            ok = False
        else:
            ok &= compare("meander eval vs expected.csv", numeric_rows(r.stdout), want)
        for storage, top in (("int8", 127), ("int16", 32767)):
            qmodel = Model(mnd, top)
            qgot = np.array(qmodel.sequences(x) if m["state"] else [qmodel(row) for row in x])
            r = subprocess.run([meander, "eval", mnd, "--input", os.path.join(folder, "inputs.csv"), "--weights-as", storage],
                               capture_output=True, text=True, cwd=folder)
            if r.returncode != 0:
                print(f"  meander eval --weights-as {storage} exited {r.returncode}: {r.stderr.strip()}: FAIL")
                ok = False
            else:
                ok &= compare(f"meander eval --weights-as {storage} vs this forward pass with {storage} weights",
                              numeric_rows(r.stdout), qgot)
    return ok


def main(argv):
    meander = None
    if "--meander" in argv:
        i = argv.index("--meander")
        meander = os.path.abspath(argv[i + 1])
        argv = argv[:i] + argv[i + 2:]
    names = argv or sorted(d for d in os.listdir(HERE)
                           if os.path.isfile(os.path.join(HERE, d, d + ".mnd")))
    results = [check(n, meander) for n in names]
    print("all samples agree" if all(results) else "MISMATCH")
    return 0 if all(results) else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
