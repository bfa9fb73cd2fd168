#!/usr/bin/env python3
"""tests/ref/metrics_eval.py — NumPy re-computation of `nightjar eval`'s depth
table from files, for the end-to-end test (tests/test_predict_cli.c).

Usage: /usr/bin/python3 tests/ref/metrics_eval.py DATASET.json SPLIT MAX_DEPTH PRED_DIR OUT.json

For every sequence of SPLIT with ground truth in "npy" format, every frame
FRAME.ext: ground truth DEPTH_DIR/FRAME.npy, prediction PRED_DIR/FRAME.depth.npy
(as written by `nightjar predict`, same size).  Protocol (Eigen et al. 2014
metrics; Zhou et al. 2017 median scaling): valid pixels 1e-3 < gt < MAX_DEPTH,
prediction times median(gt)/median(pred), clamped to [1e-3, MAX_DEPTH],
metrics per image then averaged.  The constant baseline predicts one value
everywhere, median-scaled (i.e. median(gt)).  Writes OUT.json:
{"model": {...}, "constant": {...}} with the contract's key names.
"""
import json
import os
import sys

try:
    import numpy as np
except ImportError as exc:
    sys.exit("metrics_eval.py: cannot import numpy (Debian package python3-numpy): %s" % exc)

KEYS = ["absrel", "sqrel", "rmse", "rmse_log", "delta_1_25", "delta_1_25_2", "delta_1_25_3"]


def errors(gt, pred):
    # the metric definitions and the 1.25, 1.25^2, 1.25^3 thresholds are Eigen et
    # al. 2014's, written from the literature (common practice since), not computed
    thresh = np.maximum(gt / pred, pred / gt)
    return [np.mean(np.abs(gt - pred) / gt), np.mean((gt - pred) ** 2 / gt),
            np.sqrt(np.mean((gt - pred) ** 2)), np.sqrt(np.mean((np.log(gt) - np.log(pred)) ** 2)),
            np.mean(thresh < 1.25), np.mean(thresh < 1.25 ** 2), np.mean(thresh < 1.25 ** 3)]


def summary(rows, pixels):
    d = dict(zip(KEYS, [float(v) for v in np.mean(np.array(rows), axis=0)]))
    d["pixels"] = pixels
    d["images"] = len(rows)
    return d


def main():
    dpath, split, max_depth, pred_dir, out = sys.argv[1], sys.argv[2], float(sys.argv[3]), sys.argv[4], sys.argv[5]
    root = os.path.dirname(os.path.abspath(dpath))
    desc = json.load(open(dpath))
    model, const, pixels = [], [], 0
    for s in desc["sequences"]:
        if s.get("split", "train") != split or "depth" not in s:
            continue
        assert s["depth"]["format"] == "npy"
        images = os.path.join(root, s["images"])
        for f in sorted(os.listdir(images)):
            stem = os.path.splitext(f)[0]
            gt = np.load(os.path.join(root, s["depth"]["dir"], stem + ".npy")).astype(np.float64)
            pred = np.load(os.path.join(pred_dir, stem + ".depth.npy")).astype(np.float64)
            mask = np.isfinite(gt) & (gt > 1e-3) & (gt < max_depth)
            g, p = gt[mask], pred[mask]
            if g.size == 0:
                continue
            p = np.clip(p * np.median(g) / np.median(p), 1e-3, max_depth)
            model.append(errors(g, p))
            const.append(errors(g, np.clip(np.full_like(g, np.median(g)), 1e-3, max_depth)))
            pixels += int(g.size)
    json.dump({"model": summary(model, pixels), "constant": summary(const, pixels)}, open(out, "w"))


if __name__ == "__main__":
    main()
