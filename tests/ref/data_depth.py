"""Outside references for tests/test_data_depthio.c (NumPy and OpenCV).

usage: data_depth.py make DIR    write depth files with NumPy/OpenCV from the
       test's own arrays, DIR/in_depth.f32 and DIR/in_k.f32 (raw little-endian
       float32, 23x37, written by the test with fwrite):
           np_depth.npy  in_depth as float32 (23, 37) metres (np.save)
           np_depth.pfm  the same through cv2.imwrite (Pf)
           np_depth.png  in_k as uint16, 16-bit greyscale via cv2.imwrite
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
    depth = np.fromfile(os.path.join(d, "in_depth.f32"), dtype="<f4").reshape(23, 37)
    np.save(os.path.join(d, "np_depth.npy"), depth)
    assert cv2.imwrite(os.path.join(d, "np_depth.pfm"), depth)
    kf = np.fromfile(os.path.join(d, "in_k.f32"), dtype="<f4").reshape(23, 37)
    k = kf.astype(np.uint16)
    assert np.array_equal(k.astype(np.float32), kf), "in_k.f32 holds non-integers or values beyond uint16"
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
