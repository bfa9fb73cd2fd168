#!/usr/bin/env python3
"""tests/ref/mcubes_ref.py — nightjar's marching-cubes mesh against scikit-image.

Usage: /usr/bin/python3 tests/ref/mcubes_ref.py FIELD.npy MESH.ply I0 J0 K0 OUT.npy

FIELD.npy is a (NX, NY, NZ) volume of signed values whose element [a, b, c] is
voxel (I0 + a, J0 + b, K0 + c) of a grid with voxel size 1; MESH.ply is
nightjar's mesh of its zero level set (binary PLY, read here by its own
parser following the PLY format description).  scikit-image's
skimage.measure.marching_cubes runs on the same volume, once with
method='lorensen' (the classic tables) and once with the default 'lewiner'
(Lewiner et al. 2003); its vertices are shifted by (I0, J0, K0).  Vertex sets
are matched by nearest neighbour (scipy.spatial.cKDTree) in both directions.

Writes OUT.npy (float64):
  [0] vertices in the PLY      [1] faces in the PLY     [2] PLY parsed cleanly (1/0)
  [3] skimage lorensen vertices [4] its faces
  [5] max distance ours -> lorensen  [6] max distance lorensen -> ours (voxels)
  [7] our surface area          [8] lorensen surface area
  [9] skimage lewiner vertices  [10] max ours -> lewiner  [11] max lewiner -> ours
  [12] lewiner surface area
"""
import sys

try:
    import numpy as np
    from scipy.spatial import cKDTree
    from skimage import measure
except ImportError as exc:
    sys.exit("mcubes_ref.py: needs numpy, scipy and scikit-image "
             "(Debian: python3-numpy python3-scipy python3-skimage): %s" % exc)

VERTEX = np.dtype([("x", "<f4"), ("y", "<f4"), ("z", "<f4"),
                   ("red", "u1"), ("green", "u1"), ("blue", "u1")])
FACE = np.dtype([("n", "u1"), ("a", "<i4"), ("b", "<i4"), ("c", "<i4")])


def read_mesh(path):
    data = open(path, "rb").read()
    end = data.index(b"end_header\n") + len(b"end_header\n")
    lines = data[:end].decode("ascii").splitlines()
    ok = lines[0] == "ply" and lines[1] == "format binary_little_endian 1.0"
    counts, current, props = {}, None, {}
    for ln in lines[2:]:
        f = ln.split()
        if f[0] == "element":
            current = f[1]
            counts[current] = int(f[2])
            props[current] = []
        elif f[0] == "property":
            props[current].append(tuple(f[1:]))
        elif f[0] not in ("comment", "end_header"):
            ok = False
    ok = ok and props.get("vertex") == [("float", "x"), ("float", "y"), ("float", "z"), ("uchar", "red"),
                                        ("uchar", "green"), ("uchar", "blue")]
    ok = ok and props.get("face") == [("list", "uchar", "int", "vertex_indices")]
    nv, nf = counts.get("vertex", 0), counts.get("face", 0)
    body = data[end:]
    v = np.frombuffer(body[:nv * VERTEX.itemsize], dtype=VERTEX)
    f = np.frombuffer(body[nv * VERTEX.itemsize:nv * VERTEX.itemsize + nf * FACE.itemsize], dtype=FACE)
    ok = ok and len(body) == nv * VERTEX.itemsize + nf * FACE.itemsize and bool(np.all(f["n"] == 3))
    verts = np.stack([v["x"], v["y"], v["z"]], axis=1).astype(np.float64)
    faces = np.stack([f["a"], f["b"], f["c"]], axis=1)
    return ok, verts, faces


def area(verts, faces):
    if len(faces) == 0:
        return 0.0
    a, b, c = verts[faces[:, 0]], verts[faces[:, 1]], verts[faces[:, 2]]
    return float(0.5 * np.linalg.norm(np.cross(b - a, c - a), axis=1).sum())


def match(a, b):
    if len(a) == 0 or len(b) == 0:
        return float("inf"), float("inf")
    return float(cKDTree(b).query(a)[0].max()), float(cKDTree(a).query(b)[0].max())


def main():
    if len(sys.argv) != 7:
        sys.exit(__doc__)
    field = np.load(sys.argv[1]).astype(np.float64)
    ok, verts, faces = read_mesh(sys.argv[2])
    origin = np.array([float(sys.argv[3]), float(sys.argv[4]), float(sys.argv[5])])
    lv, lf, _, _ = measure.marching_cubes(field, level=0.0, method="lorensen")
    wv, wf, _, _ = measure.marching_cubes(field, level=0.0)
    lv, wv = lv + origin, wv + origin
    a1, a2 = match(verts, lv)
    w1, w2 = match(verts, wv)
    out = [len(verts), len(faces), 1.0 if ok else 0.0, len(lv), len(lf), a1, a2, area(verts, faces),
           area(lv, lf), len(wv), w1, w2, area(wv, wf)]
    np.save(sys.argv[6], np.array(out, dtype=np.float64))


if __name__ == "__main__":
    main()
