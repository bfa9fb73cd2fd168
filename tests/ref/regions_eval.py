#!/usr/bin/env python3
"""tests/ref/regions_eval.py — NumPy re-computation of `nightjar eval`'s
row-layout oracle, depth-band, obstacle and lead-vehicle figures from files,
for the end-to-end test (tests/test_eval_cli_regions.c).

Usage: /usr/bin/python3 tests/ref/regions_eval.py DATASET.json SPLIT MAX_DEPTH PRED_DIR OUT.json

For every sequence of SPLIT with ground truth in "npy" format, every frame
FRAME.ext: ground truth DEPTH_DIR/FRAME.npy, prediction PRED_DIR/FRAME.depth.npy
(as written by `nightjar predict`), and where the sequence has "lead_mask" the
mask LEAD_DIR/FRAME.png read with Pillow (nonzero = in; a mask of an integer
multiple of the depth's size is reduced by the mean of each block >= 0.5, as
an area filter and eval's threshold do).  The protocol is the one of tests/ref/regions_ref.py (its functions are
reused).  Methods: "model" (median-scaled prediction), "baseline_constant"
(median-scaled constant), "baseline_row_layout_oracle" (median-scaled oracle).
Writes OUT.json with eval's key names:
  {"baseline_row_layout_oracle": {absrel.., pixels, images},
   "by_depth_band": [{"from_m", "to_m", "pixels", "images", METHOD: {absrel, delta_1_25, ratio_median}}],
   "obstacle_pixels": {...}, "lead_vehicle_pixels": {...} (only with masks)}
"""
import json
import os
import sys

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from regions_ref import MIN_DEPTH, REL, bands, errors, oracle_map, region_values, valid_mask  # noqa: E402

try:
    import numpy as np
    from PIL import Image
except ImportError as exc:
    sys.exit("regions_eval.py: cannot import numpy / PIL (Debian packages python3-numpy python3-pil): %s" % exc)

KEYS = ["absrel", "sqrel", "rmse", "rmse_log", "delta_1_25", "delta_1_25_2", "delta_1_25_3"]
METHODS = ["model", "baseline_constant", "baseline_row_layout_oracle"]


def frames(root, split):
    desc = json.load(open(os.path.join(root, "dataset.json")))
    for s in desc["sequences"]:
        if s.get("split", "train") != split or "depth" not in s:
            continue
        assert s["depth"]["format"] == "npy"
        images = os.path.join(root, s["images"])
        for f in sorted(os.listdir(images)):
            stem = os.path.splitext(f)[0]
            gt = np.load(os.path.join(root, s["depth"]["dir"], stem + ".npy")).astype(np.float64)
            mask = None
            if "lead_mask" in s:
                mask = np.array(Image.open(os.path.join(root, s["lead_mask"], stem + ".png"))) != 0
                if mask.ndim == 3:
                    mask = mask.any(axis=2)
                if mask.shape != gt.shape:     # an integer multiple: block means >= 0.5 (area filter)
                    fy, fx = mask.shape[0] // gt.shape[0], mask.shape[1] // gt.shape[1]
                    assert mask.shape == (gt.shape[0] * fy, gt.shape[1] * fx)
                    blocks = mask.reshape(gt.shape[0], fy, gt.shape[1], fx).mean(axis=(1, 3))
                    mask = blocks >= 0.5
            yield stem, gt, mask


def region_block(rows, pixels):
    out = {"pixels": pixels[0], "images": len(rows[0])}
    for m, name in enumerate(METHODS):
        if rows[m]:
            v = np.mean(np.array(rows[m]), axis=0)
            out[name] = {"absrel": float(v[0]), "delta_1_25": float(v[1]), "ratio_median": float(v[2])}
        else:
            out[name] = {"absrel": None, "delta_1_25": None, "ratio_median": None}
    return out


def main():
    dpath, split, cap, pred_dir, out = sys.argv[1], sys.argv[2], float(sys.argv[3]), sys.argv[4], sys.argv[5]
    root = os.path.dirname(os.path.abspath(dpath))
    bl = bands(cap)
    nreg = len(bl) + 2
    rows = [[[] for _ in METHODS] for _ in range(nreg)]
    pixels = [[0] * len(METHODS) for _ in range(nreg)]
    oracle_rows, oracle_pixels, any_mask = [], 0, False
    for stem, gt, mask in frames(root, split):
        pred = np.load(os.path.join(pred_dir, stem + ".depth.npy")).astype(np.float64)
        v = valid_mask(gt, cap)
        if not v.any():
            continue
        orc = oracle_map(gt, cap)
        g = gt[v]
        sources = [pred[v], np.ones_like(g), orc[v]]
        with np.errstate(invalid="ignore"):
            obstacle = (np.abs(gt - orc) > REL * orc)[v]
        sel = [(g >= lo) & (g < hi) for lo, hi in bl] + [obstacle]
        if mask is not None:
            any_mask = True
            sel.append(mask[v])
        for m, p in enumerate(sources):
            p = np.clip(p * np.median(g) / np.median(p), MIN_DEPTH, cap)
            if m == 2:
                oracle_rows.append(errors(g, p))
                oracle_pixels += int(g.size)
            for r, s in enumerate(sel):
                if s.any():
                    rows[r][m].append(region_values(g[s], p[s]))
                    pixels[r][m] += int(s.sum())
    res = {}
    o = dict(zip(KEYS, [float(x) for x in np.mean(np.array(oracle_rows), axis=0)]))
    o["pixels"] = oracle_pixels
    o["images"] = len(oracle_rows)
    res["baseline_row_layout_oracle"] = o
    res["by_depth_band"] = []
    for b, (lo, hi) in enumerate(bl):
        e = {"from_m": lo, "to_m": hi}
        e.update(region_block(rows[b], pixels[b]))
        res["by_depth_band"].append(e)
    res["obstacle_pixels"] = region_block(rows[len(bl)], pixels[len(bl)])
    if any_mask:
        res["lead_vehicle_pixels"] = region_block(rows[len(bl) + 1], pixels[len(bl) + 1])
    json.dump(res, open(out, "w"))


if __name__ == "__main__":
    main()
