#!/usr/bin/env python3
"""tests/ref/npy_write.py — NumPy writes .npy files for nightjar's reader to load.

Usage: /usr/bin/python3 tests/ref/npy_write.py OUTDIR

Files readable by nightjar come with a raw copy of their values in native
float32 (NAME.bin, written by ndarray.tofile) to compare against:
  f4_r1, f4_r2, f4_r3, f4_r4   float32 arrays of rank 1..4 (np.save, version 1.0)
  f8_r2                        float64 array (NAME.bin holds the values cast to float32)
  f4_v2                        float32 array written with format version 2.0
  f4_special                   infinities, signed zero, subnormals, extremes
Files nightjar must refuse (no .bin):
  bad_fortran (fortran_order True), bad_big (>f4), bad_int (<i4),
  bad_scalar (shape ()), bad_empty (shape (0, 3)), bad_rank5 (rank 5)
"""
import os
import sys

try:
    import numpy as np
except ImportError as exc:
    sys.exit("npy_write.py: cannot import numpy (Debian package python3-numpy): %s" % exc)


def main():
    if len(sys.argv) != 2:
        sys.exit("usage: npy_write.py OUTDIR")
    out = sys.argv[1]
    rng = np.random.default_rng(7)

    def good(name, arr, as_f32=None):
        np.save(os.path.join(out, name + ".npy"), arr)
        (arr if as_f32 is None else as_f32).astype(np.float32).tofile(os.path.join(out, name + ".bin"))

    for rank, shape in enumerate(((11,), (3, 5), (2, 3, 7), (2, 3, 5, 7)), start=1):
        good("f4_r%d" % rank, rng.standard_normal(shape).astype("<f4"))
    f8 = rng.standard_normal((5, 9)) * 1e3
    good("f8_r2", f8.astype("<f8"), f8.astype(np.float32))
    v2 = rng.standard_normal((3, 4, 5)).astype("<f4")
    with open(os.path.join(out, "f4_v2.npy"), "wb") as f:
        np.lib.format.write_array(f, v2, version=(2, 0))
    v2.tofile(os.path.join(out, "f4_v2.bin"))
    special = np.array([0.0, -0.0, np.inf, -np.inf, 1e-45, -1e-40, 3.4028235e38,
                        -3.4028235e38, 1.1754944e-38, 1.0, -1.0], dtype="<f4")
    good("f4_special", special)

    np.save(os.path.join(out, "bad_fortran.npy"), np.asfortranarray(rng.standard_normal((3, 4)).astype("<f4")))
    np.save(os.path.join(out, "bad_big.npy"), rng.standard_normal((3, 4)).astype(">f4"))
    np.save(os.path.join(out, "bad_int.npy"), np.arange(12, dtype="<i4").reshape(3, 4))
    np.save(os.path.join(out, "bad_scalar.npy"), np.float32(1.5))
    np.save(os.path.join(out, "bad_empty.npy"), np.zeros((0, 3), dtype="<f4"))
    np.save(os.path.join(out, "bad_rank5.npy"), np.zeros((1, 2, 1, 2, 3), dtype="<f4"))


if __name__ == "__main__":
    main()
