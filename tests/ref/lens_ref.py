#!/usr/bin/python3
"""tests/ref/lens_ref.py — OpenCV's side of tests/test_lens.c.

  lens_ref.py maps DIR   reads DIR/cases.json (cameras, lens, rig poses and the
                         pinhole views nightjar chose) and writes, per case,
                         OpenCV's maps (cv2.initUndistortRectifyMap, or
                         cv2.fisheye.initUndistortRectifyMap) for nightjar's
                         view, the source frame NAME_src.png, OpenCV's remap of
                         it (NAME_cv.png), OpenCV's undistorted points
                         (cv2.undistortPointsIter / cv2.fisheye.undistortPoints)
                         and, for a rig, cv2.stereoRectify's R1, R2, P1 and
                         baseline — those into DIR/opencv.json, maps as .npy.
  lens_ref.py chess DIR  calibrates the chessboard stereo pairs of Debian's
                         opencv-doc (findChessboardCorners, calibrateCamera,
                         stereoCalibrate), writes DIR/calib.json (in the
                         dataset's terms) and OpenCV's own row alignment after
                         its stereoRectify (alpha 0) + remap.
  lens_ref.py rows DIR   finds the chessboard corners in nightjar's rectified
                         pairs DIR/ours/{left,right}NN.png and writes the row
                         differences of matching corners to DIR/rows.json.
Exit status 0, or 1 with a message (a missing package names its install).
"""
import json
import os
import sys

try:
    import numpy as np
    import cv2
except ImportError as e:  # the C test turns this into a FAIL line
    print("lens_ref.py: %s (apt-get install python3-opencv python3-numpy)" % e)
    sys.exit(1)

CHESS_DIR = "/usr/share/doc/opencv-doc/examples/data"
PATTERN = (9, 6)   # inner corners of the opencv-doc stereo chessboard
SUBPIX = (cv2.TERM_CRITERIA_EPS + cv2.TERM_CRITERIA_MAX_ITER, 30, 0.001)


def kmat(c):
    return np.array([[c[0], 0, c[2]], [0, c[1], c[3]], [0, 0, 1]], np.float64)


def source_frame(w, h, seed):
    """A smooth, textured test frame: sinusoids and soft-edged discs, so that
    bilinear interpolation differences stay at rounding level (OpenCV's remap
    quantises positions to 1/32 pixel)."""
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0:h, 0:w].astype(np.float64)
    img = np.zeros((h, w, 3))
    for c in range(3):
        acc = np.zeros((h, w))
        for _ in range(6):
            fx, fy, ph = rng.uniform(0.002, 0.03), rng.uniform(0.002, 0.03), rng.uniform(0, 6.3)
            acc += np.sin(fx * x + fy * y + ph)
        img[..., c] = 127.5 + 20 * acc
    for _ in range(12):
        cx, cy, r = rng.uniform(0, w), rng.uniform(0, h), rng.uniform(20, 120)
        d = np.hypot(x - cx, y - cy)
        img += rng.uniform(-60, 60, 3)[None, None, :] * (1 / (1 + np.exp((d - r) / 4.0)))[..., None]
    return np.clip(np.rint(img), 0, 255).astype(np.uint8)


def case_maps(d, case, res):
    name, w, h = case["name"], case["width"], case["height"]
    K = kmat(case["camera"])
    P = kmat(case["pinhole"])
    D = np.array(case["coeffs"], np.float64)
    R = np.array(case["R"], np.float64).reshape(3, 3)
    if case.get("rig"):
        # OpenCV's rectification of the same rig; its R1 / R2 replace ours in the map
        rig = case["rig"]
        rot = np.array(rig["rotation"], np.float64).reshape(3, 3)
        pos = np.array(rig["position"], np.float64)
        Rcv, Tcv = rot.T, -rot.T @ pos           # X2 = Rcv X1 + Tcv
        K2 = kmat(rig["camera"])
        D2 = np.array(rig["coeffs"], np.float64)
        R1, R2, P1, P2, Q, _, _ = cv2.stereoRectify(K, D, K2, D2, (w, h), Rcv, Tcv, alpha=0)
        res["R1"] = R1.ravel().tolist()
        res["R2"] = R2.ravel().tolist()
        res["pinhole"] = [P1[0, 0], P1[1, 1], P1[0, 2], P1[1, 2]]
        res["baseline"] = -P2[0, 3] / P2[0, 0]
        R = R2 if case.get("right") else R1
        if case.get("right"):
            K, D = K2, D2
    if case["model"] == "fisheye":
        mx, my = cv2.fisheye.initUndistortRectifyMap(K, D, R, P, (w, h), cv2.CV_32FC1)
    else:
        mx, my = cv2.initUndistortRectifyMap(K, D, R, P, (w, h), cv2.CV_32FC1)
    np.save(os.path.join(d, name + "_mapx.npy"), mx)
    np.save(os.path.join(d, name + "_mapy.npy"), my)
    src = source_frame(w, h, case["seed"])
    cv2.imwrite(os.path.join(d, name + "_src.png"), src)
    out = cv2.remap(src, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    cv2.imwrite(os.path.join(d, name + "_cv.png"), out)
    pts = np.array(case["points"], np.float64).reshape(-1, 1, 2)
    if case["model"] == "fisheye":
        crit = (cv2.TERM_CRITERIA_COUNT + cv2.TERM_CRITERIA_EPS, 100, 1e-14)
        und = cv2.fisheye.undistortPoints(pts, K, D, criteria=crit)
    else:
        crit = (cv2.TERM_CRITERIA_COUNT + cv2.TERM_CRITERIA_EPS, 200, 1e-14)
        und = cv2.undistortPointsIter(pts, K, D, None, None, crit)
    res["points"] = und.reshape(-1).tolist()


def mode_maps(d):
    with open(os.path.join(d, "cases.json")) as f:
        cases = json.load(f)["cases"]
    out = {}
    for c in cases:
        out[c["name"]] = {}
        case_maps(d, c, out[c["name"]])
    with open(os.path.join(d, "opencv.json"), "w") as f:
        json.dump(out, f, default=float)


def corners(gray):
    ok, c = cv2.findChessboardCorners(gray, PATTERN)
    if not ok:
        return None
    return cv2.cornerSubPix(gray, c, (11, 11), (-1, -1), SUBPIX)[:, 0, :]


def row_stats(diffs):
    e = np.concatenate(diffs) if diffs else np.array([np.inf])
    return {"pairs": len(diffs), "corners": int(e.size), "rms": float(np.sqrt((e ** 2).mean())),
            "p95": float(np.percentile(e, 95)), "mean": float(e.mean()), "max": float(e.max())}


def mode_chess(d):
    objp = np.zeros((PATTERN[0] * PATTERN[1], 3), np.float32)
    objp[:, :2] = np.mgrid[0:PATTERN[0], 0:PATTERN[1]].T.reshape(-1, 2)   # one square = 1 unit
    L, R, O, used = [], [], [], []
    for i in range(1, 15):
        a = os.path.join(CHESS_DIR, "left%02d.jpg" % i)
        b = os.path.join(CHESS_DIR, "right%02d.jpg" % i)
        if not (os.path.exists(a) and os.path.exists(b)):
            continue
        ga, gb = cv2.imread(a, cv2.IMREAD_GRAYSCALE), cv2.imread(b, cv2.IMREAD_GRAYSCALE)
        ca, cb = corners(ga), corners(gb)
        if ca is None or cb is None:
            continue
        L.append(ca.reshape(-1, 1, 2))
        R.append(cb.reshape(-1, 1, 2))
        O.append(objp)
        used.append(i)
    if len(used) < 5:
        print("lens_ref.py: only %d chessboard pairs found under %s" % (len(used), CHESS_DIR))
        sys.exit(1)
    size = (ga.shape[1], ga.shape[0])
    _, K1, D1, _, _ = cv2.calibrateCamera(O, L, size, None, None)
    _, K2, D2, _, _ = cv2.calibrateCamera(O, R, size, None, None)
    rms, K1, D1, K2, D2, Rm, T, _, _ = cv2.stereoCalibrate(O, L, R, K1, D1, K2, D2, size, flags=cv2.CALIB_FIX_INTRINSIC)
    # OpenCV's own rectification of the same pairs
    R1, R2, P1, P2, _, _, _ = cv2.stereoRectify(K1, D1, K2, D2, size, Rm, T, alpha=0)
    m1 = cv2.initUndistortRectifyMap(K1, D1, R1, P1, size, cv2.CV_32FC1)
    m2 = cv2.initUndistortRectifyMap(K2, D2, R2, P2, size, cv2.CV_32FC1)
    diffs = []
    for i in used:
        ga = cv2.imread(os.path.join(CHESS_DIR, "left%02d.jpg" % i), cv2.IMREAD_GRAYSCALE)
        gb = cv2.imread(os.path.join(CHESS_DIR, "right%02d.jpg" % i), cv2.IMREAD_GRAYSCALE)
        ca = corners(cv2.remap(ga, m1[0], m1[1], cv2.INTER_LINEAR))
        cb = corners(cv2.remap(gb, m2[0], m2[1], cv2.INTER_LINEAR))
        if ca is not None and cb is not None:
            diffs.append(np.abs(ca[:, 1] - cb[:, 1]))

    def cam(K, D):
        k = D.ravel()
        return {"fx": K[0, 0], "fy": K[1, 1], "cx": K[0, 2], "cy": K[1, 2],
                "lens": {"model": "radial-tangential", "k1": k[0], "k2": k[1], "p1": k[2], "p2": k[3], "k3": k[4]}}
    right = cam(K2, D2)
    right["rotation"] = [float(v) for v in Rm.T.ravel()]          # right-camera directions → left frame
    right["position"] = [float(v) for v in (-Rm.T @ T).ravel()]   # right optical centre in the left frame
    out = {"width": size[0], "height": size[1], "pairs": used, "stereo_rms": rms,
           "camera": cam(K1, D1), "right_camera": right,
           "opencv_rows": row_stats(diffs), "opencv_pinhole": [P1[0, 0], P1[1, 1], P1[0, 2], P1[1, 2]]}
    with open(os.path.join(d, "calib.json"), "w") as f:
        json.dump(out, f, default=float)


def mode_rows(d):
    with open(os.path.join(d, "calib.json")) as f:
        used = json.load(f)["pairs"]
    diffs = []
    for i in used:
        ga = cv2.imread(os.path.join(d, "ours", "left%02d.png" % i), cv2.IMREAD_GRAYSCALE)
        gb = cv2.imread(os.path.join(d, "ours", "right%02d.png" % i), cv2.IMREAD_GRAYSCALE)
        if ga is None or gb is None:
            continue
        ca, cb = corners(ga), corners(gb)
        if ca is not None and cb is not None:
            diffs.append(np.abs(ca[:, 1] - cb[:, 1]))
    with open(os.path.join(d, "rows.json"), "w") as f:
        json.dump(row_stats(diffs), f)


if __name__ == "__main__":
    if len(sys.argv) != 3 or sys.argv[1] not in ("maps", "chess", "rows"):
        print("usage: lens_ref.py maps|chess|rows DIR")
        sys.exit(2)
    {"maps": mode_maps, "chess": mode_chess, "rows": mode_rows}[sys.argv[1]](sys.argv[2])
