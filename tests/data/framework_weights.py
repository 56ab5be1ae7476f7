"""Writes the framework weight files that test_framework_weights reads, and
the values PyTorch holds for each tensor (frameworks.json).

Run with /usr/bin/python3 (PyTorch 1.13 on Debian 12):
    /usr/bin/python3 tests/data/framework_weights.py tests/data/frameworks

The .pt files come from torch.save itself. safetensors files are written here
from the published layout (8-byte little-endian header length, JSON header,
raw little-endian data), since the safetensors package is not in Debian 12.
The expected values are torch's own, widened to float64 by torch.
"""
import collections
import json
import os
import struct
import sys
import zipfile

import torch

out = sys.argv[1]
os.makedirs(out, exist_ok=True)
torch.manual_seed(8)

net = torch.nn.Sequential(torch.nn.Linear(3, 4), torch.nn.Tanh(), torch.nn.Linear(4, 2))
sd = net.state_dict()
expected = {}


def record(file, tensors):
    expected[file] = {k: {"shape": list(v.shape), "values": v.double().flatten().tolist()} for k, v in tensors.items()}


# A plain state dict (an OrderedDict with _metadata).
torch.save(sd, os.path.join(out, "plain.pt"))
record("plain.pt", sd)

# A training checkpoint that nests the state dict beside other things.
adam = torch.optim.Adam(net.parameters())
torch.save({"epoch": 3, "model": {"state_dict": sd}, "optimizer": adam.state_dict(), "note": "run 7"},
           os.path.join(out, "nested.pt"))
record("nested.pt", sd)

# Element types, views and parameters.
base = torch.arange(24, dtype=torch.float32).reshape(4, 6) / 7
odd = {
    "half": torch.tensor([1.0, -2.5, 65504.0, 6e-8, 1e-4, 0.0, -0.0, 3.140625], dtype=torch.float16),
    "brain": torch.tensor([1.0, -2.5, 3e38, 1e-39, 0.1, 7.0], dtype=torch.bfloat16),
    "double": torch.tensor([[0.1, 1e-300], [-5e-324, 2.0]], dtype=torch.float64),
    "count": torch.tensor(12345, dtype=torch.int64),
    "transposed": base.t(),                 # strides (1, 6) into base's storage
    "window": base.flatten()[5:11],          # storage offset 5
    "column": base[:, 2],                    # offset 2, stride 6
    "param": torch.nn.Parameter(torch.tensor([0.5, 0.25])),
}
torch.save(odd, os.path.join(out, "views.pt"))
record("views.pt", {k: v.detach() for k, v in odd.items()})

# A big-endian archive: the same plain state dict with its storages byte-swapped.
with zipfile.ZipFile(os.path.join(out, "plain.pt")) as z, \
        zipfile.ZipFile(os.path.join(out, "big_endian.pt"), "w") as w:
    for name in z.namelist():
        data = z.read(name)
        if "/data/" in name:
            data = b"".join(data[i:i + 4][::-1] for i in range(0, len(data), 4))
        w.writestr(name, data)
    w.writestr("plain/byteorder", "big")
record("big_endian.pt", sd)

# Damaged checkpoints, each with one fault.
def rewrite(src, dst, change):
    with zipfile.ZipFile(os.path.join(out, src)) as z, zipfile.ZipFile(os.path.join(out, dst), "w") as w:
        for name in z.namelist():
            data = change(name, z.read(name))
            if data is not None:
                w.writestr(name, data)

rewrite("plain.pt", "no_storage.pt", lambda n, d: None if n.endswith("/data/1") else d)
# A global a dictionary of tensors never uses (pickle.dumps of os.system writes exactly this).
rewrite("plain.pt", "evil_global.pt", lambda n, d: b"\x80\x02cos\nsystem\nq\x00X\x02\x00\x00\x00idq\x01\x85q\x02Rq\x03." if n.endswith("data.pkl") else d)
# INT (text form, protocol 0): an opcode torch.save never writes.
rewrite("plain.pt", "odd_opcode.pt", lambda n, d: b"\x80\x02}q\x00(X\x01\x00\x00\x00aI7\nu." if n.endswith("data.pkl") else d)


def safetensors(path, tensors, metadata=None):
    header, blobs, at = collections.OrderedDict(), [], 0
    if metadata:
        header["__metadata__"] = metadata
    names = {torch.float32: "F32", torch.float64: "F64", torch.float16: "F16", torch.bfloat16: "BF16", torch.int64: "I64"}
    for k, v in tensors.items():
        v = v.detach().contiguous()
        raw = v.view(torch.int16).numpy().tobytes() if v.dtype == torch.bfloat16 else v.numpy().tobytes()
        header[k] = {"dtype": names[v.dtype], "shape": list(v.shape), "data_offsets": [at, at + len(raw)]}
        blobs.append(raw)
        at += len(raw)
    text = json.dumps(header, separators=(",", ":")).encode()
    text += b" " * (-len(text) % 8)
    with open(path, "wb") as f:
        f.write(struct.pack("<Q", len(text)) + text + b"".join(blobs))


safetensors(os.path.join(out, "plain.safetensors"), sd, {"format": "pt"})
record("plain.safetensors", sd)
views = {k: v.detach() for k, v in odd.items()}
safetensors(os.path.join(out, "views.safetensors"), views)
record("views.safetensors", views)

# PyTorch's forward pass of the network in float64, for the end-to-end check.
x = torch.tensor([0.5, -1.0, 2.0], dtype=torch.float64)
expected["forward"] = {"input": x.tolist(), "output": net.double()(x).tolist()}

with open(os.path.join(out, "frameworks.json"), "w") as f:
    json.dump(expected, f, indent=1, sort_keys=True)
    f.write("\n")
