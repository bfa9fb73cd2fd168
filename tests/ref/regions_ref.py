#!/usr/bin/env python3
"""tests/ref/regions_ref.py — NumPy reference for eval's row-layout oracle,
depth-band metrics and obstacle / masked-pixel metrics.

Usage: /usr/bin/python3 tests/ref/regions_ref.py DIR MAX_DEPTH

Reads (written by tests/test_eval_regions.c with nj_npy_write):
  DIR/gt.npy    (I, H, W) ground-truth depth (0, NaN or >= MAX_DEPTH = no data)
  DIR/pred.npy  (I, H, W) predicted depth (unknown scale)
  DIR/mask.npy  (I, H, W) a pixel mask (nonzero = in), like a lead-vehicle mask
Writes DIR/ref.npy (float64, flat):
  [0]                 NB, the number of depth bands below MAX_DEPTH
  [1 : 1+NB]          their lower edges, then NB upper edges
  then I*H*W          the row-layout oracle map
  then I*H*W          the obstacle flags (0/1)
  then for each method (model = pred median-scaled, constant = 1 median-scaled,
  metric = pred unscaled, oracle = the oracle map median-scaled):
    8 numbers: absrel sqrel rmse rmse_log d1 d2 d3 pixels over all valid pixels
    for each region (NB bands, obstacles, mask): absrel d1 ratio pixels images

Protocol, as stated in the brief (issue 18 part C) and train/measure/metrics.h:
  valid pixels: finite gt with 1e-3 < gt < MAX_DEPTH (Eigen et al. 2014 /
  Zhou et al. 2017 evaluation, as in tests/ref/metrics_ref.py);
  oracle: every pixel of a row = np.median of the row's valid gt; a row without
  valid gt takes np.median of the image's valid gt;
  obstacle: valid and |gt - row median| > 0.2 * row median;
  bands of the true depth [0,3) [3,6) [6,10) [10,20) [20,cap), bands at or
  beyond the cap dropped, upper edges capped;
  per image: scale = median(gt)/median(pred) over the valid pixels (the
  whole image, not per region), p = clip(pred*scale, 1e-3, MAX_DEPTH);
  region metrics: mean |gt-p|/gt, share of max(gt/p, p/gt) < 1.25, and the
  median of p/gt; averaged over the images that have pixels in the region.
Written independently of the C code (np.median, boolean masks, np.nanmedian
is not used: invalid pixels are removed before any median).
"""
import sys

try:
    import numpy as np
except ImportError as exc:
    sys.exit("regions_ref.py: cannot import numpy (Debian package python3-numpy): %s" % exc)

MIN_DEPTH = 1e-3
EDGES = [0.0, 3.0, 6.0, 10.0, 20.0]
REL = 0.2


def bands(cap):
    out = []
    for i, lo in enumerate(EDGES):
        if lo >= cap:
            break
        hi = EDGES[i + 1] if i + 1 < len(EDGES) else cap
        out.append((lo, min(hi, cap)))
    return out


def valid_mask(gt, cap):
    with np.errstate(invalid="ignore"):
        return np.isfinite(gt) & (gt > MIN_DEPTH) & (gt < cap)


def oracle_map(gt, cap):
    v = valid_mask(gt, cap)
    image_median = np.median(gt[v]) if v.any() else np.nan
    out = np.empty_like(gt)
    for y in range(gt.shape[0]):
        row = gt[y][v[y]]
        out[y, :] = np.median(row) if row.size else image_median
    return out


def errors(g, p):
    t = np.maximum(g / p, p / g)
    return [np.mean(np.abs(g - p) / g), np.mean((g - p) ** 2 / g), np.sqrt(np.mean((g - p) ** 2)),
            np.sqrt(np.mean((np.log(g) - np.log(p)) ** 2)),
            np.mean(t < 1.25), np.mean(t < 1.25 ** 2), np.mean(t < 1.25 ** 3)]


def region_values(g, p):
    t = np.maximum(g / p, p / g)
    return [np.mean(np.abs(g - p) / g), np.mean(t < 1.25), np.median(p / g)]


def main():
    d, cap = sys.argv[1], float(sys.argv[2])
    gt_all = np.load(d + "/gt.npy").astype(np.float64)
    pred_all = np.load(d + "/pred.npy").astype(np.float64)
    mask_all = np.load(d + "/mask.npy") != 0
    bl = bands(cap)
    n_images = gt_all.shape[0]
    oracles = np.array([oracle_map(gt_all[i], cap) for i in range(n_images)])
    flags = np.zeros_like(gt_all)
    for i in range(n_images):
        v = valid_mask(gt_all[i], cap)
        with np.errstate(invalid="ignore"):
            flags[i] = v & (np.abs(gt_all[i] - oracles[i]) > REL * oracles[i])
    out = [len(bl)] + [b[0] for b in bl] + [b[1] for b in bl]
    out += list(oracles.ravel()) + list(flags.ravel())
    methods = [("median", lambda i: pred_all[i]), ("median", lambda i: np.ones_like(gt_all[i])),
               ("none", lambda i: pred_all[i]), ("median", lambda i: oracles[i])]
    for scaling, source in methods:
        whole, pixels = [], 0
        regions = [[] for _ in range(len(bl) + 2)]
        region_pixels = [0] * (len(bl) + 2)
        for i in range(n_images):
            v = valid_mask(gt_all[i], cap)
            g, p = gt_all[i][v], source(i)[v]
            if g.size == 0:
                continue
            scale = np.median(g) / np.median(p) if scaling == "median" else 1.0
            p = np.clip(p * scale, MIN_DEPTH, cap)
            whole.append(errors(g, p))
            pixels += g.size
            selections = [(g >= lo) & (g < hi) for lo, hi in bl]
            selections += [flags[i][v] != 0, mask_all[i][v]]
            for r, sel in enumerate(selections):
                if sel.any():
                    regions[r].append(region_values(g[sel], p[sel]))
                    region_pixels[r] += int(sel.sum())
        out += list(np.mean(np.array(whole), axis=0)) + [pixels]
        for r in range(len(bl) + 2):
            if regions[r]:
                out += list(np.mean(np.array(regions[r]), axis=0)) + [region_pixels[r], len(regions[r])]
            else:
                out += [0, 0, 0, 0, 0]
    np.save(d + "/ref.npy", np.array(out, dtype=np.float64))


if __name__ == "__main__":
    main()
