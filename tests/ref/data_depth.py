"""Outside references for tests/test_data_depthio.c (NumPy and OpenCV).

usage: data_depth.py make DIR    write depth files with NumPy/OpenCV:
           np_depth.npy  float32 (23, 37) metres (np.save)
           np_depth.pfm  the same through cv2.imwrite (Pf)
           np_k.npy      float32 copy of the uint16 values written to
           np_depth.png  16-bit greyscale via cv2.imwrite
       data_depth.py check DIR   read nightjar's files and compare exactly:
           c_depth.npy (np.load) with c_depth.pfm (cv2.imread), and
           c_k.npy with c_depth.png (cv2.imread IMREAD_UNCHANGED, uint16)
Exit status 0 when everything matches, 1 otherwise (with a message).
"""
import os
import sys

import cv2
import numpy as np


def make(d):
    rng = np.random.default_rng(7)
    depth = (rng.random((23, 37)) * 80.0).astype(np.float32)
    depth[3, 5] = 0.0
    np.save(os.path.join(d, "np_depth.npy"), depth)
    assert cv2.imwrite(os.path.join(d, "np_depth.pfm"), depth)
    k = rng.integers(0, 65536, size=(23, 37)).astype(np.uint16)
    np.save(os.path.join(d, "np_k.npy"), k.astype(np.float32))
    assert cv2.imwrite(os.path.join(d, "np_depth.png"), k)


def check(d):
    depth = np.load(os.path.join(d, "c_depth.npy"))
    pfm = cv2.imread(os.path.join(d, "c_depth.pfm"), cv2.IMREAD_UNCHANGED)
    if pfm is None or pfm.dtype != np.float32 or pfm.shape != depth.shape or not np.array_equal(pfm, depth):
        print("PFM written by nightjar does not match under OpenCV")
        return 1
    k = np.load(os.path.join(d, "c_k.npy"))
    png = cv2.imread(os.path.join(d, "c_depth.png"), cv2.IMREAD_UNCHANGED)
    if png is None or png.dtype != np.uint16 or png.shape != k.shape or not np.array_equal(png.astype(np.float32), k):
        print("16-bit PNG written by nightjar does not match under OpenCV")
        return 1
    return 0


if __name__ == "__main__":
    if sys.argv[1] == "make":
        make(sys.argv[2])
        sys.exit(0)
    sys.exit(check(sys.argv[2]))
