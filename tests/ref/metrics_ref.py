#!/usr/bin/env python3
"""tests/ref/metrics_ref.py — NumPy reference for nightjar's evaluation metrics.

Usage: /usr/bin/python3 tests/ref/metrics_ref.py DIR MAX_DEPTH

Reads (written by tests/test_metrics.c with nj_npy_write):
  DIR/gt.npy    (I, H, W) ground-truth depth, 0 = no data
  DIR/pred.npy  (I, H, W) predicted depth (unknown scale)
  DIR/q.npy     (N,) values for quantiles
  DIR/c2w.npy   (S, 5, 3, 4) ground-truth camera-to-world poses per snippet
  DIR/rel.npy   (S, 4, 3, 4) predicted motions: rel[s, i] maps points of
                camera i into camera i+1
Writes DIR/ref.npy (float64, flat):
  [0:10]   median scaling: absrel sqrel rmse rmse_log d1 d2 d3, pixels,
           mean and population std of the per-image ratios median(gt)/median(pred)
  [10:20]  no scaling (ratio 1): the same ten numbers
  [20:25]  quantiles of q at 0, 0.05, 0.5, 0.95, 1 (np.quantile, linear)
  then per snippet: ate, rmse, scale (3·S numbers)

The depth protocol is the one of Eigen et al. 2014 as evaluated by Zhou et al.
2017 / Godard et al. 2019: valid pixels 1e-3 < gt < MAX_DEPTH, per-image
median ratio, prediction clamped to [1e-3, MAX_DEPTH], metrics per image then
averaged over images.  The pose protocol is Zhou et al. 2017's 5-frame
snippet ATE: positions relative to the first frame, first frames aligned,
scale = sum(gt*pred)/sum(pred**2), ate = sqrt(sum(err**2)) / n.
Written independently of the C code: matrices are inverted with
np.linalg.inv and composed with @.
"""
import sys

try:
    import numpy as np
except ImportError as exc:
    sys.exit("metrics_ref.py: cannot import numpy (Debian package python3-numpy): %s" % exc)

MIN_DEPTH = 1e-3   # the usual evaluation floor of Zhou et al. 2017 / Godard et al. 2019 (common practice)


def errors(gt, pred):
    # the metric definitions and the 1.25, 1.25^2, 1.25^3 thresholds are Eigen et
    # al. 2014's, written from the literature (common practice since), not computed
    thresh = np.maximum(gt / pred, pred / gt)
    return [np.mean(np.abs(gt - pred) / gt),
            np.mean((gt - pred) ** 2 / gt),
            np.sqrt(np.mean((gt - pred) ** 2)),
            np.sqrt(np.mean((np.log(gt) - np.log(pred)) ** 2)),
            np.mean(thresh < 1.25),
            np.mean(thresh < 1.25 ** 2),
            np.mean(thresh < 1.25 ** 3)]


def depth_metrics(gt_all, pred_all, max_depth, median):
    rows, ratios, pixels = [], [], 0
    for gt, pred in zip(gt_all, pred_all):
        gt = gt.astype(np.float64)
        pred = pred.astype(np.float64)
        mask = np.isfinite(gt) & (gt > MIN_DEPTH) & (gt < max_depth)
        g, p = gt[mask], pred[mask]
        if g.size == 0:
            continue
        ratio = np.median(g) / np.median(p) if median else 1.0
        p = np.clip(p * ratio, MIN_DEPTH, max_depth)
        rows.append(errors(g, p))
        ratios.append(ratio)
        pixels += g.size
    ratios = np.array(ratios)
    return list(np.mean(np.array(rows), axis=0)) + [pixels, ratios.mean(), ratios.std()]


def to4(P):
    M = np.eye(4)
    M[:3, :] = P
    return M


def snippet_ate(c2w, rel):
    n = c2w.shape[0]
    first = np.linalg.inv(to4(c2w[0]))
    gt = np.array([(first @ to4(c2w[i]))[:3, 3] for i in range(n)])
    poses = [np.eye(4)]
    for i in range(n - 1):                 # camera i+1 in the first camera's frame
        poses.append(poses[-1] @ np.linalg.inv(to4(rel[i])))
    pred = np.array([P[:3, 3] for P in poses])
    pred = pred + (gt[0] - pred[0])
    scale = np.sum(gt * pred) / np.sum(pred ** 2)
    err = pred * scale - gt
    return [np.sqrt(np.sum(err ** 2)) / n, np.sqrt(np.sum(err ** 2) / n), scale]


def main():
    d, max_depth = sys.argv[1], float(sys.argv[2])
    gt = np.load(d + "/gt.npy")
    pred = np.load(d + "/pred.npy")
    q = np.load(d + "/q.npy").astype(np.float64)
    c2w = np.load(d + "/c2w.npy").astype(np.float64)
    rel = np.load(d + "/rel.npy").astype(np.float64)
    out = depth_metrics(gt, pred, max_depth, True) + depth_metrics(gt, pred, max_depth, False)
    out += list(np.quantile(q, [0, 0.05, 0.5, 0.95, 1]))
    for s in range(c2w.shape[0]):
        out += snippet_ate(c2w[s], rel[s])
    np.save(d + "/ref.npy", np.array(out, dtype=np.float64))


if __name__ == "__main__":
    main()
