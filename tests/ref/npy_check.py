#!/usr/bin/env python3
"""tests/ref/npy_check.py — NumPy checks .npy files written by nightjar.

Usage: /usr/bin/python3 tests/ref/npy_check.py DIR

DIR/manifest.txt lists one file per line: "NAME D0 [D1 ...]".  For each,
DIR/NAME.npy (written by nj_npy_write) must load with np.load(allow_pickle=
False) as a C-ordered float32 array of that shape whose bits equal those of
DIR/NAME.bin (the same values dumped raw, native float32), and its header must
be format version 1.0 with fortran_order False, padded so the data starts at a
multiple of 64 bytes.  Prints one line per file; exits 1 on any mismatch, 3 if
the manifest is empty.
"""
import os
import sys

try:
    import numpy as np
except ImportError as exc:
    sys.exit("npy_check.py: cannot import numpy (Debian package python3-numpy): %s" % exc)


def check_one(d, name, shape):
    path = os.path.join(d, name + ".npy")
    with open(path, "rb") as f:
        version = np.lib.format.read_magic(f)
        if version != (1, 0):
            return "format version %r, expected (1, 0)" % (version,)
        hshape, fortran, dtype = np.lib.format.read_array_header_1_0(f)
        if fortran or hshape != shape or dtype != np.dtype("<f4"):
            return "header says shape %r fortran %r dtype %r" % (hshape, fortran, dtype)
        if f.tell() % 64 != 0:
            return "data starts at byte %d, not a multiple of 64" % f.tell()
    a = np.load(path, allow_pickle=False)
    b = np.fromfile(os.path.join(d, name + ".bin"), dtype=np.float32)
    if a.shape != shape or a.dtype != np.float32 or not a.flags.c_contiguous:
        return "loaded shape %r dtype %r" % (a.shape, a.dtype)
    if b.size != a.size or not np.array_equal(a.reshape(-1).view(np.uint32), b.view(np.uint32)):
        return "values differ from the raw dump"
    return None


def main():
    if len(sys.argv) != 2:
        sys.exit("usage: npy_check.py DIR")
    d = sys.argv[1]
    with open(os.path.join(d, "manifest.txt")) as f:
        entries = [line.split() for line in f if line.strip()]
    if not entries:
        print("numpy: empty manifest")
        sys.exit(3)
    bad = 0
    for parts in entries:
        name, shape = parts[0], tuple(int(v) for v in parts[1:])
        why = check_one(d, name, shape)
        print("numpy %s %s%s" % ("ok" if why is None else "MISMATCH", name, "" if why is None else ": " + why))
        bad += why is not None
    sys.exit(1 if bad else 0)


if __name__ == "__main__":
    main()
