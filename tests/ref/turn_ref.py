#!/usr/bin/python3
"""tests/ref/turn_ref.py — OpenCV's and SciPy's side of tests/test_data_turn.c.

Usage: /usr/bin/python3 tests/ref/turn_ref.py DIR

DIR/cases.json lists cases {"name", "fx", "fy", "cx", "cy", "rot"} (rot: a
rotation vector in radians, camera axes x right, y down, z forward);
DIR/NAME_in.npy holds the planar image (planes × h × w).  For each case this
writes, for the view of the camera turned about its centre by R =
scipy.spatial.transform.Rotation.from_rotvec(rot) (a point X of the recorded
camera is R·X in the turned one):
  NAME_cv.npy  cv2.warpPerspective with the homography K·R·K⁻¹ (recorded →
               turned pixel), bilinear, edge pixels replicated;
  NAME_sp.npy  scipy.ndimage.map_coordinates (order 1, mode "nearest") at
               the recorded pixel H⁻¹·p of every turned pixel p, H⁻¹ from
               numpy.linalg.inv.
Exit status 0, or 1 with a message (a missing package names its install).
"""
import json
import os
import sys

try:
    import numpy as np
    import cv2
    from scipy import ndimage
    from scipy.spatial.transform import Rotation
except ImportError as e:
    sys.exit("turn_ref.py: %s (Debian packages python3-opencv, python3-scipy, python3-numpy: "
             "tools/deps.sh test)" % e)


def main():
    if len(sys.argv) != 2:
        sys.exit("usage: turn_ref.py DIR")
    d = sys.argv[1]
    with open(os.path.join(d, "cases.json")) as f:
        cases = json.load(f)
    for c in cases:
        img = np.load(os.path.join(d, c["name"] + "_in.npy")).astype(np.float32)
        planes, h, w = img.shape
        K = np.array([[c["fx"], 0, c["cx"]], [0, c["fy"], c["cy"]], [0, 0, 1]], dtype=np.float64)
        R = Rotation.from_rotvec(c["rot"]).as_matrix()
        Hm = K @ R @ np.linalg.inv(K)
        cv = np.stack([cv2.warpPerspective(img[k], Hm, (w, h), flags=cv2.INTER_LINEAR,
                                           borderMode=cv2.BORDER_REPLICATE) for k in range(planes)])
        Hi = np.linalg.inv(Hm)
        v, u = np.mgrid[0:h, 0:w].astype(np.float64)
        p = Hi @ np.stack([u.ravel(), v.ravel(), np.ones(u.size)])
        xs, ys = p[0] / p[2], p[1] / p[2]
        sp = np.stack([ndimage.map_coordinates(img[k].astype(np.float64), [ys, xs], order=1, mode="nearest")
                       .reshape(h, w) for k in range(planes)])
        np.save(os.path.join(d, c["name"] + "_cv.npy"), cv.astype(np.float32))
        np.save(os.path.join(d, c["name"] + "_sp.npy"), sp.astype(np.float32))
    return 0


if __name__ == "__main__":
    sys.exit(main())
