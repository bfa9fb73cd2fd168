"""tests/ref/safetensors_read.py — an independent reader of the safetensors
files written by `nightjar export`, from the published format description
only (numpy, no safetensors library):
  bytes 0..7   N, unsigned 64-bit little-endian: the header's length
  bytes 8..8+N JSON object: tensor name -> {"dtype", "shape", "data_offsets":
               [begin, end]} (offsets relative to the end of the header), plus
               an optional "__metadata__" object of string -> string
  rest         the tensors' raw little-endian bytes, with no gaps or overlaps.

usage: safetensors_read.py FILE RAWDIR f32|int8
RAWDIR holds the checkpoint's raw parameters as the test dumped them:
manifest.txt ("unit norm" per line) and UNIT.{w,b,gamma,beta,mean,var}.npy.
Expected tensors are computed here in numpy: batch norm folded as
w' = w * s, b' = (b - mean) * s + beta with s = gamma / sqrt(var + eps)
(Ioffe & Szegedy 2015; eps = float32 1e-5), b - mean in float32 and the
rest in float64, then for int8
per-output-channel symmetric quantisation scale = max|w'| / 127 (float32),
q = round-half-even(w' / scale) clipped to [-127, 127].  Every tensor must
match bit for bit.  Exit 0 when all hold, else 1 with a message."""
import json
import os
import struct
import sys

import numpy as np

DTYPES = {"F32": np.dtype("<f4"), "I8": np.dtype("i1"), "F64": np.dtype("<f8"), "I32": np.dtype("<i4"),
          "I64": np.dtype("<i8"), "U8": np.dtype("u1"), "F16": np.dtype("<f2")}


def fail(msg):
    print("safetensors_read: " + msg)
    sys.exit(1)


def read(path):
    with open(path, "rb") as f:
        blob = f.read()
    if len(blob) < 8:
        fail("file shorter than 8 bytes")
    (n,) = struct.unpack("<Q", blob[:8])
    if 8 + n > len(blob):
        fail("header length %d beyond the file" % n)
    header = json.loads(blob[8:8 + n].decode("utf-8"))
    data = blob[8 + n:]
    meta = header.pop("__metadata__", {})
    tensors, spans = {}, []
    for name, info in header.items():
        dt = DTYPES[info["dtype"]]
        shape = tuple(info["shape"])
        b, e = info["data_offsets"]
        if e - b != int(np.prod(shape)) * dt.itemsize or e > len(data):
            fail("%s: offsets %d..%d do not fit shape %s of %s" % (name, b, e, shape, info["dtype"]))
        tensors[name] = np.frombuffer(data[b:e], dtype=dt).reshape(shape)
        spans.append((b, e))
    spans.sort()
    pos = 0
    for b, e in spans:
        if b != pos:
            fail("gap or overlap at byte %d" % b)
        pos = e
    if pos != len(data):
        fail("%d bytes after the last tensor" % (len(data) - pos))
    return meta, tensors


def fold(raw, unit):
    w = np.load(os.path.join(raw, unit + ".w.npy")).astype(np.float32)
    b = np.load(os.path.join(raw, unit + ".b.npy")).astype(np.float32)
    s = np.load(os.path.join(raw, unit + ".gamma.npy")).astype(np.float64) / np.sqrt(
        np.load(os.path.join(raw, unit + ".var.npy")).astype(np.float64) + np.float64(np.float32(1e-5)))
    mean = np.load(os.path.join(raw, unit + ".mean.npy")).astype(np.float64)
    beta = np.load(os.path.join(raw, unit + ".beta.npy")).astype(np.float64)
    wf = (w.astype(np.float64) * s.reshape(-1, 1, 1, 1)).astype(np.float32)
    bf = ((b - mean.astype(np.float32)).astype(np.float64) * s + beta).astype(np.float32)
    return wf, bf


def quantise(w):
    rows = w.reshape(w.shape[0], -1)
    m = np.max(np.abs(rows), axis=1)
    scale = np.where(m > 0, m / np.float32(127.0), np.float32(1.0)).astype(np.float32)
    q = np.clip(np.rint(rows / scale[:, None]), -127, 127).astype(np.int8)
    return q.reshape(w.shape), scale


def same(name, got, want):
    if got.dtype != want.dtype or got.shape != want.shape:
        fail("%s: %s %s, expected %s %s" % (name, got.dtype, got.shape, want.dtype, want.shape))
    if got.tobytes() != want.tobytes():
        bad = int(np.sum(got.view(np.uint8) != want.view(np.uint8)))
        fail("%s: not bit-exact (%d differing bytes)" % (name, bad))


def main():
    if len(sys.argv) != 4 or sys.argv[3] not in ("f32", "int8"):
        fail("usage: safetensors_read.py FILE RAWDIR f32|int8")
    path, raw, kind = sys.argv[1:]
    meta, tensors = read(path)
    units = [line.split() for line in open(os.path.join(raw, "manifest.txt")) if line.strip()]
    expected = {}
    for unit, norm in units:
        if norm == "batch":
            w, b = fold(raw, unit)
        else:
            w = np.load(os.path.join(raw, unit + ".w.npy")).astype(np.float32)
            b = np.load(os.path.join(raw, unit + ".b.npy")).astype(np.float32)
        if norm == "group":
            expected[unit + ".norm_gamma"] = np.load(os.path.join(raw, unit + ".gamma.npy")).astype(np.float32)
            expected[unit + ".norm_beta"] = np.load(os.path.join(raw, unit + ".beta.npy")).astype(np.float32)
        expected[unit + ".bias"] = b
        if kind == "int8":
            expected[unit + ".weight"], expected[unit + ".weight_scale"] = quantise(w)
        else:
            expected[unit + ".weight"] = w
    if sorted(tensors) != sorted(expected):
        fail("tensor names differ: extra %s, missing %s" % (sorted(set(tensors) - set(expected))[:5],
                                                             sorted(set(expected) - set(tensors))[:5]))
    for name, want in expected.items():
        same(name, tensors[name], want)
    try:
        arch = json.loads(meta["nightjar.architecture"])
        cfg = json.loads(meta["nightjar.training_config"])
    except (KeyError, ValueError) as e:
        fail("metadata architecture / training config missing or not JSON: %s" % e)
    if [l["name"] for l in arch["layers"]] != [u for u, _ in units] or meta.get("nightjar.weights") != kind:
        fail("architecture layers or weights kind do not match the checkpoint")
    if not isinstance(cfg, dict) or "model" not in cfg or cfg["model"].get("stages") != arch["stages"]:
        fail("training config does not carry the model section of the architecture")
    sys.exit(0)


main()
