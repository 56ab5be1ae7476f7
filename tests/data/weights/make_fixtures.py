#!/usr/bin/python3
"""Writes the weight fixtures of tests/unit/weights.cpp with NumPy (1.24).

Run with Debian's /usr/bin/python3 (the Python that sees NumPy) from any
folder; it rewrites the files beside itself. expected.json records, for every
fixture, each tensor's name, dtype, shape and the bit patterns NumPy stored,
so the C++ test compares bits, not decimal text.
"""
import json
import os
import shutil

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
rng = np.random.default_rng(20261201)

F32 = np.finfo(np.float32)
F64 = np.finfo(np.float64)

# Values chosen to exercise every corner of the binary formats and of the
# listing's shortest round-trip text: signed zeros, subnormals, extremes.
special32 = np.array([
    0.0, -0.0, 1.0, -1.5, F32.max, -F32.max, F32.tiny, -F32.tiny,
    np.float32(2.0 ** -149), np.nextafter(F32.tiny, np.float32(0)), 1 / 3, np.pi,
], dtype=np.float32)
special64 = np.array([
    0.0, -0.0, F64.max, -F64.tiny, 2.0 ** -1074, np.nextafter(F64.tiny, 0.0),
    0.1, 1 / 3, np.e, -123456.789e-200, 1e300, 5e-324,
], dtype=np.float64)


def bits(a):
    a = np.ascontiguousarray(a)
    if a.dtype.itemsize == 4:
        return ["{:08x}".format(int(v)) for v in a.astype("<f4").view("<u4").ravel()]
    return ["{:016x}".format(int(v)) for v in a.astype("<f8").view("<u8").ravel()]


def record(arrays):
    return [{"name": name, "dtype": "float32" if a.dtype.itemsize == 4 else "float64",
             "shape": list(a.shape), "bits": bits(a)} for name, a in arrays]


def save_npy(name, a, version=None):
    with open(os.path.join(HERE, name), "wb") as f:
        np.lib.format.write_array(f, a, version=version)


expected = {"numpy": np.__version__}

# Single arrays: both byte orders of both dtypes, every header version, ranks 0..4.
cases = [
    ("f4_le.npy", special32.reshape(3, 4).astype("<f4"), (1, 0)),
    ("f4_be.npy", special32.reshape(3, 4).astype(">f4"), (1, 0)),
    ("f8_le.npy", special64.reshape(2, 6).astype("<f8"), (1, 0)),
    ("f8_be.npy", special64.reshape(2, 6).astype(">f8"), (1, 0)),
    ("v2_rank1.npy", rng.standard_normal(5).astype("<f4"), (2, 0)),
    ("v3_rank4.npy", rng.standard_normal((2, 1, 3, 2)).astype(">f8"), (3, 0)),
    ("scalar.npy", np.array(-2.5, dtype="<f8"), (1, 0)),
    ("empty.npy", np.zeros((0, 3), dtype="<f4"), (1, 0)),
]
for name, a, version in cases:
    save_npy(name, a, version)
    expected[name] = record([(name[:-4], a)])

# Archives: numpy.savez stores members, numpy.savez_compressed deflates them.
layers = [
    ("lift.weight", rng.standard_normal((16, 6)).astype(np.float32)),
    ("lift.bias", rng.standard_normal(16).astype(np.float32)),
    ("head.weight", rng.standard_normal((3, 16)).astype(np.float64)),
    ("head.bias", np.zeros(3, dtype=np.float64)),
]
np.savez(os.path.join(HERE, "stored.npz"), **dict(layers))
np.savez_compressed(os.path.join(HERE, "deflated.npz"), **dict(layers))
expected["stored.npz"] = record(layers)
expected["deflated.npz"] = record(layers)

# A folder of .npy files; written out of name order on purpose.
folder = os.path.join(HERE, "folder")
shutil.rmtree(folder, ignore_errors=True)
os.makedirs(folder)
folder_arrays = [
    ("zeta", rng.standard_normal((2, 2)).astype(np.float32)),
    ("alpha.weight", rng.standard_normal((3, 2)).astype(np.float32)),
    ("mid", rng.standard_normal(4).astype(np.float64)),
]
for name, a in folder_arrays:
    np.save(os.path.join(folder, name + ".npy"), a)
with open(os.path.join(folder, "notes.txt"), "w") as f:
    f.write("not a weights file; the folder reader skips it\n")
expected["folder"] = record(sorted(folder_arrays, key=lambda p: p[0]))

# A weight listing whose numbers are NumPy's own shortest round-trip text
# (numpy.format_float_scientific, unique=True): reading it must give NumPy's bits.
def text(v):
    return np.format_float_scientific(v, unique=True, trim="-")

listing = [
    ("plain", special32.reshape(2, 6)),
    ("wide", rng.standard_normal((2, 10)).astype(np.float32)),     # rows wrap after 8 values
    ("deep", special64.reshape(3, 2, 2)),
    ("one", np.array(7.25, dtype=np.float64)),
    ('odd name#1', rng.standard_normal(3).astype(np.float32)),     # needs quotes
]
lines = ["meander-weights 1", "# written by make_fixtures.py with NumPy " + np.__version__]
for name, a in listing:
    quoted = '"' + name + '"' if (" " in name or "#" in name) else name
    dtype = "float32" if a.dtype.itemsize == 4 else "float64"
    lines.append("")
    lines.append(" ".join(["tensor", quoted, dtype] + [str(d) for d in a.shape]) + "   # a comment")
    rows = a.reshape(-1, a.shape[-1]) if a.ndim else a.reshape(1, 1)
    for row in rows:
        for i in range(0, len(row), 8):
            lines.append(" ".join(text(v) for v in row[i:i + 8]))
with open(os.path.join(HERE, "numpy_text.mnw"), "w") as f:
    f.write("\n".join(lines) + "\n")
expected["numpy_text.mnw"] = record(listing)

with open(os.path.join(HERE, "expected.json"), "w") as f:
    json.dump(expected, f, indent=1, sort_keys=True)
    f.write("\n")
