#!/usr/bin/env python3
"""tests/ref/ply_read.py — an independent reader for nightjar's point clouds.

Usage: /usr/bin/python3 tests/ref/ply_read.py PLY DEPTH.npy IMAGE.npy fx fy cx cy OUT.npy

Parses PLY (header by the PLY format description: "ply", a format line, element
and property lines, "end_header"; then the binary vertex records read with a
NumPy structured dtype), and compares it with the points computed here from
DEPTH.npy (H, W), IMAGE.npy (3, H, W, values k/255) and the pinhole
intrinsics: one vertex per pixel with finite depth > 0, row-major order,
X = z·((u − cx)/fx, (v − cy)/fy, 1), colour = round(255·value).
Writes OUT.npy (float64): [header ok, vertices in file, vertices expected,
max |xyz difference| / (1 + |xyz|), max |colour difference|, bytes left over].
"""
import sys

try:
    import numpy as np
except ImportError as exc:
    sys.exit("ply_read.py: cannot import numpy (Debian package python3-numpy): %s" % exc)

WANT_PROPS = [("float", "x"), ("float", "y"), ("float", "z"),
              ("uchar", "red"), ("uchar", "green"), ("uchar", "blue")]
VERTEX = np.dtype([("x", "<f4"), ("y", "<f4"), ("z", "<f4"),
                   ("red", "u1"), ("green", "u1"), ("blue", "u1")])


def read_ply(path):
    data = open(path, "rb").read()
    end = data.index(b"end_header\n") + len(b"end_header\n")
    lines = data[:end].decode("ascii").splitlines()
    ok = lines[0] == "ply" and lines[1] == "format binary_little_endian 1.0"
    count, props = None, []
    for ln in lines[2:]:
        f = ln.split()
        if f[0] == "element":
            ok = ok and f[1] == "vertex" and count is None
            count = int(f[2])
        elif f[0] == "property":
            props.append((f[1], f[2]))
        elif f[0] not in ("comment", "end_header"):
            ok = False
    ok = ok and props == WANT_PROPS and count is not None
    body = data[end:]
    n = len(body) // VERTEX.itemsize
    verts = np.frombuffer(body[:n * VERTEX.itemsize], dtype=VERTEX)
    return ok, count, verts, len(body) - (count or 0) * VERTEX.itemsize


def main():
    ply, dpath, ipath = sys.argv[1:4]
    fx, fy, cx, cy = map(float, sys.argv[4:8])
    ok, count, verts, left = read_ply(ply)
    depth = np.load(dpath).astype(np.float64)
    image = np.load(ipath).astype(np.float64)
    h, w = depth.shape
    v, u = np.mgrid[0:h, 0:w]
    valid = np.isfinite(depth) & (depth > 0)
    z = depth[valid]
    xyz = np.stack([(u[valid] - cx) / fx * z, (v[valid] - cy) / fy * z, z], axis=1)
    rgb = np.stack([np.round(image[c][valid] * 255) for c in range(3)], axis=1)
    m = min(len(verts), len(z))
    got = np.stack([verts["x"], verts["y"], verts["z"]], axis=1)[:m].astype(np.float64)
    gotc = np.stack([verts["red"], verts["green"], verts["blue"]], axis=1)[:m].astype(np.float64)
    dxyz = np.max(np.abs(got - xyz[:m]) / (1 + np.abs(xyz[:m]))) if m else 0.0
    dcol = np.max(np.abs(gotc - rgb[:m])) if m else 0.0
    out = [float(ok), float(count if count is not None else -1), float(len(z)), dxyz, dcol, float(left)]
    np.save(sys.argv[8], np.array(out, dtype=np.float64))


if __name__ == "__main__":
    main()
