#!/usr/bin/env python3
"""tests/ref/rpe_ref.py — SciPy reference for the rotation error of frame-pair
motions (train/measure/rpe.c).
Usage: /usr/bin/python3 tests/ref/rpe_ref.py DIR
Reads DIR/c2w.npy (S, 5, 3, 4) camera-to-world poses and DIR/rel.npy
(S, 4, 3, 4) predicted motions (rel[s, i] maps points of camera i into camera
i+1), both written by tests/test_metrics.c.
Writes DIR/rpe.npy (float64, flat), per snippet and pair: the angle of
R_predᵀ R_true, the true rotation angle, the predicted rotation angle (radians),
all from scipy.spatial.transform.Rotation.magnitude(); the true motion is
inv(C_{i+1}) @ C_i with 4x4 matrices and np.linalg.inv.
"""
import sys
try:
    import numpy as np
    from scipy.spatial.transform import Rotation
except ImportError as exc:
    sys.exit("rpe_ref.py: cannot import numpy/scipy (Debian python3-numpy, python3-scipy): %s" % exc)


def to4(P):
    M = np.eye(4)
    M[:3, :] = P
    return M


def main():
    d = sys.argv[1]
    c2w = np.load(d + "/c2w.npy").astype(np.float64)
    rel = np.load(d + "/rel.npy").astype(np.float64)
    out = []
    for s in range(c2w.shape[0]):
        for i in range(rel.shape[1]):
            true = np.linalg.inv(to4(c2w[s, i + 1])) @ to4(c2w[s, i])
            Rt, Rp = true[:3, :3], rel[s, i, :, :3]
            # from_matrix takes the nearest rotation of these float32-rounded matrices
            out += [Rotation.from_matrix(Rp.T @ Rt).magnitude(), Rotation.from_matrix(Rt).magnitude(),
                    Rotation.from_matrix(Rp).magnitude()]
    np.save(d + "/rpe.npy", np.array(out, dtype=np.float64))


if __name__ == "__main__":
    main()
