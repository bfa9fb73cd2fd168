#!/usr/bin/env python3
"""tests/ref/eval_pose_ref.py — NumPy/SciPy re-computation of the "pose" block
of `nightjar eval`'s metrics.json from files (tests/test_eval_pose.c,
tests/test_predict_cli.c).

Usage: /usr/bin/python3 tests/ref/eval_pose_ref.py DATASET.json SPLIT MOTIONS_DIR OUT.json [STEP]

For every sequence of SPLIT with "poses" and at least 5 of them: the
ground-truth camera-to-world poses parsed here from the poses file
(np.loadtxt, 12 numbers per line, '#' comments), and the model's motions
between consecutive frames from MOTIONS_DIR/NAME.rel.f64 (raw little-endian
float64, (frames - 1) x 3 x 4: motion i maps points of camera i into camera
i + 1), written by the test from the model through the library.  With STEP
(default 1) only every STEP-th pose is kept (frames 0, STEP, 2*STEP, ...: a
model trained on frame offsets of STEP and more), and the motions are those
between the kept frames.

Protocol (Zhou et al. 2017's 5-frame snippets, as in tests/ref/metrics_ref.py):
for every run of 5 consecutive frames, positions relative to the first frame
(np.linalg.inv and @ on 4x4 matrices), predicted positions by composing the
inverted motions, first frames aligned, least-squares scale
sum(gt*pred)/sum(pred**2), ate = sqrt(sum |err|^2) / 5 and
rmse = sqrt(sum |err|^2 / 5).  Over all snippets of the split: the mean ate,
its population standard deviation (np.std), the mean rmse and mean scale.
Rotation: for every consecutive pair, the angle of R_pred^T R_true and of
R_true (scipy Rotation.from_matrix(...).magnitude()), with
true = inv(C_{i+1}) @ C_i, means in degrees.  Per camera axis (pitch x,
yaw y, roll z): the components of Rotation.from_matrix(...).as_rotvec() of
the predicted and the true motion; the mean and the root-mean-square of
their difference, the mean and the root-mean-square of the true component,
degrees; the slope of the least-squares line of predicted on true
(np.polyfit, degree 1) and their correlation (np.corrcoef).
Stopped camera: the pairs whose true translation is below 2% of their
sequence's mean true translation (np.linalg.norm); over them the mean
predicted rotation angle and the mean predicted translation length divided
by the mean over the other (moving) pairs, whose mean rotation error is
reported apart.  Heading of the moving pairs: camera i + 1's centre in
camera i's frame, c = -R^T t (x right, y down, z forward), for the predicted
and the true motion; the mean angle between them (np.arccos of the
normalised dot product, clipped), and the mean errors of the elevation
np.arctan2(-c_y, hypot(c_x, c_z)) and the azimuth np.arctan2(c_x, c_z),
with the true elevation's mean, degrees.
Gap: where MOTIONS_DIR/NAME.rel2.f64 exists ((frames - 2) x 3 x 4: motion i
maps camera i into camera i + 2, of the kept frames), for every triple
i, i + 1, i + 2 whose two true halves both move (the stopped rule above, per
half) and whose predicted halves are not both zero: the translation length
(np.linalg.norm) of i -> i + 2 over the summed lengths of i -> i + 1 and
i + 1 -> i + 2, for the model and for the truth; their means over triples.

Writes OUT.json: {"ate", "ate_std", "rmse", "scale_mean", "snippets",
"rotation_error_deg", "rotation_true_deg", "pairs", "frame_step", and for AXIS in pitch,
yaw, roll: "AXIS_mean_error_deg", "AXIS_rms_error_deg", "AXIS_true_rms_deg",
"AXIS_true_mean_deg", "AXIS_slope", "AXIS_correlation"}
plus "gap_triples", "gap_translation_ratio", "gap_translation_ratio_true"
where every sequence has the rel2 file, "still_pairs", "moving_rotation_error_deg", "heading_error_deg",
"heading_elevation_mean_error_deg", "heading_elevation_true_mean_deg",
"heading_azimuth_mean_error_deg", and where there are still
pairs "still_rotation_deg", "still_translation_ratio" (metrics.json's keys).
"""
import json
import os
import sys

try:
    import numpy as np
    from scipy.spatial.transform import Rotation
except ImportError as exc:
    sys.exit("eval_pose_ref.py: cannot import numpy/scipy (Debian python3-numpy, python3-scipy): %s" % exc)

SNIPPET = 5


# the trajectory error of one snippet and the 4x4 lift: the metrics reference's own
# (one copy of the formula for both reference scripts)
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from metrics_ref import snippet_ate, to4  # noqa: E402


def main():
    dpath, split, motions, out = sys.argv[1:5]
    step = int(sys.argv[5]) if len(sys.argv) > 5 else 1
    root = os.path.dirname(os.path.abspath(dpath))
    desc = json.load(open(dpath))
    ates, rmses, scales, rot_err, rot_true, vec_err, vec_true = [], [], [], [], [], [], []
    still_rot, still_t, moving_t, moving_err = [], [], [], []
    head_err, elev_err, azim_err, elev_true = [], [], [], []
    gap, gap_true, gap_files = [], [], True
    for s in desc["sequences"]:
        if s.get("split", "train") != split or "poses" not in s:
            continue
        c2w = np.loadtxt(os.path.join(root, s["poses"]), comments="#", ndmin=2).reshape(-1, 3, 4)[::step]
        n = c2w.shape[0]
        if n < SNIPPET:
            continue
        rel = np.fromfile(os.path.join(motions, s["name"] + ".rel.f64"), dtype="<f8").reshape(-1, 3, 4)
        assert rel.shape[0] == n - 1, "%s: %d motions for %d poses" % (s["name"], rel.shape[0], n)
        for st in range(n - SNIPPET + 1):
            a, r, k = snippet_ate(c2w[st:st + SNIPPET], rel[st:st + SNIPPET - 1])
            ates.append(a)
            rmses.append(r)
            scales.append(k)
        true_t = [np.linalg.norm((np.linalg.inv(to4(c2w[i + 1])) @ to4(c2w[i]))[:3, 3]) for i in range(n - 1)]
        for i in range(n - 1):
            err = Rotation.from_matrix(rel[i, :, :3].T @ (np.linalg.inv(to4(c2w[i + 1])) @ to4(c2w[i]))[:3, :3]).magnitude()
            if true_t[i] < 0.02 * np.mean(true_t):
                still_rot.append(Rotation.from_matrix(rel[i, :, :3]).magnitude())
                still_t.append(np.linalg.norm(rel[i, :, 3]))
            else:
                moving_t.append(np.linalg.norm(rel[i, :, 3]))
                moving_err.append(err)
                true = np.linalg.inv(to4(c2w[i + 1])) @ to4(c2w[i])
                cp = -rel[i, :, :3].T @ rel[i, :, 3]
                ct = -true[:3, :3].T @ true[:3, 3]
                cosang = cp @ ct / (np.linalg.norm(cp) * np.linalg.norm(ct))
                head_err.append(np.arccos(np.clip(cosang, -1.0, 1.0)))
                ep, et = np.arctan2(-cp[1], np.hypot(cp[0], cp[2])), np.arctan2(-ct[1], np.hypot(ct[0], ct[2]))
                elev_err.append(ep - et)
                elev_true.append(et)
                azim_err.append(np.arctan2(cp[0], cp[2]) - np.arctan2(ct[0], ct[2]))
        rel2_path = os.path.join(motions, s["name"] + ".rel2.f64")
        gap_files = gap_files and os.path.exists(rel2_path)
        if gap_files:
            rel2 = np.fromfile(rel2_path, dtype="<f8").reshape(-1, 3, 4)
            assert rel2.shape[0] == n - 2, "%s: %d two-gap motions for %d poses" % (s["name"], rel2.shape[0], n)
            for i in range(n - 2):
                ta, tb = true_t[i], true_t[i + 1]
                pa, pb = np.linalg.norm(rel[i, :, 3]), np.linalg.norm(rel[i + 1, :, 3])
                if ta < 0.02 * np.mean(true_t) or tb < 0.02 * np.mean(true_t) or not pa + pb > 0:
                    continue
                gap.append(np.linalg.norm(rel2[i, :, 3]) / (pa + pb))
                t2 = np.linalg.norm((np.linalg.inv(to4(c2w[i + 2])) @ to4(c2w[i]))[:3, 3])
                gap_true.append(t2 / (ta + tb))
        for i in range(n - 1):
            true = np.linalg.inv(to4(c2w[i + 1])) @ to4(c2w[i])
            Rt, Rp = true[:3, :3], rel[i, :, :3]
            rot_err.append(Rotation.from_matrix(Rp.T @ Rt).magnitude())
            rot_true.append(Rotation.from_matrix(Rt).magnitude())
            vt = Rotation.from_matrix(Rt).as_rotvec()
            vec_err.append(Rotation.from_matrix(Rp).as_rotvec() - vt)
            vec_true.append(vt)
    res = {"ate": float(np.mean(ates)), "ate_std": float(np.std(ates)), "rmse": float(np.mean(rmses)),
           "scale_mean": float(np.mean(scales)), "snippets": len(ates),
           "rotation_error_deg": float(np.degrees(np.mean(rot_err))),
           "rotation_true_deg": float(np.degrees(np.mean(rot_true))), "pairs": len(rot_err), "frame_step": step}
    res["still_pairs"] = len(still_rot)
    if gap_files:
        res["gap_triples"] = len(gap)
        if gap:
            res["gap_translation_ratio"] = float(np.mean(gap))
            res["gap_translation_ratio_true"] = float(np.mean(gap_true))
    if moving_err:
        res["moving_rotation_error_deg"] = float(np.degrees(np.mean(moving_err)))
        res["heading_error_deg"] = float(np.degrees(np.mean(head_err)))
        res["heading_elevation_mean_error_deg"] = float(np.degrees(np.mean(elev_err)))
        res["heading_elevation_true_mean_deg"] = float(np.degrees(np.mean(elev_true)))
        res["heading_azimuth_mean_error_deg"] = float(np.degrees(np.mean(azim_err)))
    if still_rot:
        res["still_rotation_deg"] = float(np.degrees(np.mean(still_rot)))
        res["still_translation_ratio"] = float(np.mean(still_t) / np.mean(moving_t)) if moving_t else 0.0
    ve, vt = np.degrees(np.array(vec_err)), np.degrees(np.array(vec_true))
    for k, axis in enumerate(("pitch", "yaw", "roll")):
        res[axis + "_mean_error_deg"] = float(np.mean(ve[:, k]))
        res[axis + "_rms_error_deg"] = float(np.sqrt(np.mean(ve[:, k] ** 2)))
        res[axis + "_true_rms_deg"] = float(np.sqrt(np.mean(vt[:, k] ** 2)))
        res[axis + "_true_mean_deg"] = float(np.mean(vt[:, k]))
        vp = ve[:, k] + vt[:, k]
        res[axis + "_slope"] = float(np.polyfit(vt[:, k], vp, 1)[0])
        res[axis + "_correlation"] = float(np.corrcoef(vt[:, k], vp)[0, 1])
    json.dump(res, open(out, "w"), indent=1)


if __name__ == "__main__":
    main()
