#!/usr/bin/env python3
"""tests/ref/losses_ref.py — outside references for nightjar's losses/.

Usage: /usr/bin/python3 tests/ref/losses_ref.py MODE:OUTDIR   (one argument)

Every reference value comes from a library this project did not write:
  ssim        scikit-image structural_similarity(win_size=3, gaussian_weights=False,
              use_sample_covariance=False, data_range=1, full=True) on random images and on
              scikit-image's "camera" photograph (natural image).
  sample      PyTorch grid_sample(bilinear, padding_mode="border", align_corners=True):
              values and gradients w.r.t. image and pixel coordinates; OpenCV remap
              (INTER_LINEAR, BORDER_REPLICATE) values.  Coordinates are multiples of 1/32
              so OpenCV's fixed-point coordinate grid represents them exactly.
  rotation    SciPy Rotation.from_rotvec(...).as_matrix(), including angles near 0 and π.
  vsloss      an independent PyTorch (float64) implementation of the whole view-synthesis
              loss; value and gradients w.r.t. the disparity pyramid and the 6-number poses.
              Written from these publications (and not from nightjar's code):
                SSIM with a 3x3 box window, C1 = 0.01^2, C2 = 0.03^2 — Wang et al. 2004,
                  "Image quality assessment: from error visibility to structural similarity";
                photometric error alpha*(1 - SSIM)/2 + (1 - alpha)*|a - b|, alpha = 0.85 —
                  Godard et al. 2017 (unsupervised monocular depth with left-right consistency);
                view synthesis by back-projecting depth, moving by (R, t) and sampling the
                  source bilinearly — Zhou et al. 2017 (unsupervised depth and ego-motion);
                Rodrigues' rotation formula R = I + sin(theta) K + (1 - cos(theta)) K^2;
                per-pixel minimum over sources and auto-masking of pixels where an unwarped
                  source matches better, multi-scale losses computed at full resolution, depth
                  from a sigmoid disparity as 1 / (1/max + (1/min - 1/max) s) — Godard et al. 2019
                  (digging into self-supervised monocular depth estimation);
                edge-aware smoothness of mean-normalised disparity, |dx d*| exp(-|dx I|),
                  weighted 1/2^s per scale — Godard et al. 2017 and 2019.
              These are nightjar's own conventions, reproduced here on purpose so the
              comparison is like with like, NOT taken from a publication:
                the off-view penalty (a pixel whose projection falls outside the source or
                  behind the camera gets error 1e3, so it never wins the minimum, and is left
                  out of the mean when every source is off-view);
                the saturation guard weight * mean(relu(-log d - 6) + relu(-log(1 - d) - 6))
                  (mode vsloss_guard);
                the grouped form (mode vsloss_offsets, loss.each_offset): minimum and
                  auto-mask within each group of sources (two groups of two here), the
                  groups' masked terms summed over their masked pixels;
                the normaliser: the mean over the masked pixels (not over all pixels), the
                  1e-7 in the mean normalisation, and the depth range 0.1 .. 100 m (the
                  model's default depth_range);
                border padding and align_corners=True in the sampler, reflection padding of
                  the SSIM window.
  camera      OpenCV resize(INTER_AREA) and cropping of an image with a sub-pixel dot: where
              the dot's centroid lands checks the intrinsics' resize/crop convention.
  rays        OpenCV undistortPoints (no distortion) of every pixel centre of a 24x14
              image: the normalised image coordinates K^-1 [u v 1] the pose net's ray
              channels hold (nj_camera_rays).
  free_space  the ground's inverse depth along every pixel's ray (OpenCV undistortPoints rays,
              ray-plane intersection z = dist / (n . d), bounded where z <= reach . dist) for
              two planes, and the free-space
              hinge mean(max(0, 1 - q / b)) over bounded pixels with its gradient by PyTorch
              autograd (the hinge is nightjar's own formula, losses/free_space.h: this checks
              the code against that specification).
  motorcycle  the Middlebury 2014 "motorcycle" stereo pair with ground-truth disparity
              (Scharstein et al. 2014) as shipped by scikit-image (data.stereo_motorcycle).
Inputs and results are exchanged as float32 .npy files in OUTDIR.
"""
import os
import sys

import numpy as np


def save(out, name, a):
    np.save(os.path.join(out, name + ".npy"), np.ascontiguousarray(a, dtype=np.float32))


def mode_ssim(out):
    from skimage.metrics import structural_similarity
    from skimage import data
    rng = np.random.default_rng(11)
    a = rng.random((23, 31)).astype(np.float32)
    b = np.clip(a + 0.2 * rng.standard_normal(a.shape), 0, 1).astype(np.float32)
    cam = data.camera()[200:264, 180:260].astype(np.float32) / 255.0
    cam2 = np.clip(np.roll(cam, 1, axis=1) * 0.9 + 0.05 +
                   0.02 * rng.standard_normal(cam.shape), 0, 1).astype(np.float32)
    for tag, x, y in (("random", a, b), ("camera", cam, cam2)):
        _, s = structural_similarity(x.astype(np.float64), y.astype(np.float64), win_size=3,
                                     gaussian_weights=False, use_sample_covariance=False,
                                     data_range=1.0, full=True)
        save(out, tag + "_a", x)
        save(out, tag + "_b", y)
        save(out, tag + "_ssim", s)


def mode_sample(out):
    import torch
    import torch.nn.functional as F
    import cv2
    rng = np.random.default_rng(5)
    N, C, H, W, Ho, Wo = 2, 3, 9, 13, 7, 11
    img = rng.random((N, C, H, W)).astype(np.float32)
    # pixel coordinates on a 1/32 grid, partly outside the image (border clamp)
    xs = np.round(rng.uniform(-2.0, W + 1.0, (N, Ho, Wo)) * 32) / 32
    ys = np.round(rng.uniform(-2.0, H + 1.0, (N, Ho, Wo)) * 32) / 32
    # keep coordinates off exact integers, where the one-sided derivatives differ
    xs = np.where(np.abs(xs - np.round(xs)) < 1e-6, xs + 1.0 / 32, xs)
    ys = np.where(np.abs(ys - np.round(ys)) < 1e-6, ys + 1.0 / 32, ys)
    coords = np.stack([xs, ys], axis=1).astype(np.float32)
    go = rng.standard_normal((N, C, Ho, Wo)).astype(np.float32)
    ti = torch.tensor(img, dtype=torch.float64, requires_grad=True)
    tc = torch.tensor(coords, dtype=torch.float64, requires_grad=True)
    gx = 2 * tc[:, 0] / (W - 1) - 1
    gy = 2 * tc[:, 1] / (H - 1) - 1
    grid = torch.stack([gx, gy], dim=-1)
    y = F.grid_sample(ti, grid, mode="bilinear", padding_mode="border", align_corners=True)
    (y * torch.tensor(go, dtype=torch.float64)).sum().backward()
    save(out, "img", img)
    save(out, "coords", coords)
    save(out, "go", go)
    save(out, "torch_y", y.detach().numpy())
    save(out, "torch_gimg", ti.grad.numpy())
    save(out, "torch_gcoords", tc.grad.numpy())
    cvy = np.zeros((N, C, Ho, Wo), np.float32)
    for n in range(N):
        for c in range(C):
            cvy[n, c] = cv2.remap(img[n, c], xs[n].astype(np.float32), ys[n].astype(np.float32),
                                  cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    save(out, "cv_y", cvy)


def mode_rotation(out):
    from scipy.spatial.transform import Rotation
    rng = np.random.default_rng(3)
    vecs = []
    for mag in (0.0, 1e-9, 1e-6, 1e-4, 5e-3, 9.99e-3, 1.01e-2, 0.3, 1.0, 2.5,
                np.pi - 1e-3, np.pi - 1e-6, np.pi):
        for _ in range(3):
            d = rng.standard_normal(3)
            vecs.append(d / np.linalg.norm(d) * mag)
    vecs = np.array(vecs, dtype=np.float32)
    mats = Rotation.from_rotvec(vecs.astype(np.float64)).as_matrix()
    save(out, "rotvec", vecs)
    save(out, "matrix", mats)


# ---------------------------------------------------------------- view synthesis
def _ssim(x, y, F):
    pad = lambda t: F.pad(t, (1, 1, 1, 1), mode="reflect")
    mu_x = F.avg_pool2d(pad(x), 3, 1)
    mu_y = F.avg_pool2d(pad(y), 3, 1)
    sx = F.avg_pool2d(pad(x * x), 3, 1) - mu_x ** 2
    sy = F.avg_pool2d(pad(y * y), 3, 1) - mu_y ** 2
    sxy = F.avg_pool2d(pad(x * y), 3, 1) - mu_x * mu_y
    c1, c2 = 0.01 ** 2, 0.03 ** 2
    return ((2 * mu_x * mu_y + c1) * (2 * sxy + c2)) / ((mu_x ** 2 + mu_y ** 2 + c1) * (sx + sy + c2))


def _pe(a, b, F, torch, alpha=0.85):
    dssim = torch.clamp((1 - _ssim(a, b, F)) / 2, 0, 1)
    return (alpha * dssim + (1 - alpha) * (a - b).abs()).mean(1, keepdim=True)


def _rodrigues(v, torch):
    theta = torch.sqrt((v ** 2).sum(-1, keepdim=True))
    k = v / theta
    K = torch.zeros(v.shape[0], 3, 3, dtype=v.dtype)
    K[:, 0, 1], K[:, 0, 2], K[:, 1, 2] = -k[:, 2], k[:, 1], -k[:, 0]
    K[:, 1, 0], K[:, 2, 0], K[:, 2, 1] = k[:, 2], -k[:, 1], k[:, 0]
    s, c = torch.sin(theta)[..., None], torch.cos(theta)[..., None]
    eye = torch.eye(3, dtype=v.dtype).expand(v.shape[0], 3, 3)
    return eye + s * K + (1 - c) * (K @ K)


def mode_vsloss(out, guard=0.0, groups=None):
    """The whole loss; with guard > 0 some disparities sit deep in both sigmoid
    bounds and the saturation guard, weight * mean(relu(-log d - 6) +
    relu(-log(1 - d) - 6)) per scale, is part of the total.  With groups (a
    group index per source, mode vsloss_offsets: loss.each_offset) the
    minimum and the auto-mask are taken within each group, and the
    photometric term is the sum of every group's masked minimum over the
    count of every group's masked pixels; mask0 is 1 where any group uses the
    pixel."""
    import torch
    import torch.nn.functional as F
    rng = np.random.default_rng(17)
    N, H, W, S, nsrc = 2, 24, 32, 4, (len(groups) if groups else 2)
    min_d, max_d, smooth_w = 0.1, 100.0, 1e-3
    # a smooth target (bilinear from 6x8 random values) and sources with noise of 0.3 or 0.02 per
    # pixel: a warp then beats the un-warped source where the source's noise at the sampled point
    # is the smaller one, so the auto-mask keeps part of the pixels (on white-noise images with
    # uniform noise it kept none, and the photometric term did not take part in the comparison)
    # (the guard mode keeps the white-noise images: with saturated disparities some warps land
    # on the source's border, where float32 and float64 can decide a pixel's mask differently)
    if guard > 0:
        target = rng.random((N, 3, H, W)).astype(np.float32)
        sources = [np.clip(target + 0.1 * rng.standard_normal(target.shape), 0, 1).astype(np.float32)
                   for _ in range(nsrc)]
    else:
        coarse = torch.tensor(rng.uniform(0.2, 0.8, (N, 3, 6, 8)))
        target = F.interpolate(coarse, size=(H, W), mode="bilinear", align_corners=False).numpy().astype(np.float32)
        sources = [np.clip(target + np.where(rng.random(target.shape) < 0.5, 0.3, 0.02) *
                           rng.standard_normal(target.shape), 0, 1).astype(np.float32) for _ in range(nsrc)]
    posevec = [np.concatenate([rng.uniform(-0.05, 0.05, (N, 3)), rng.uniform(-0.3, 0.3, (N, 3))],
                              axis=1).astype(np.float32) for _ in range(nsrc)]
    disps = [rng.uniform(0.05, 0.4, (N, 1, H >> s, W >> s)).astype(np.float32) for s in range(S)]
    if guard > 0:
        for d in disps:
            pick = rng.random(d.shape)
            d[pick < 0.2] = np.exp(rng.uniform(-12, -3, (pick < 0.2).sum()))
            d[pick > 0.9] = 1 - np.exp(rng.uniform(-12, -3, (pick > 0.9).sum()))
    cams = np.array([[30.0, 28.0, 15.5, 11.0], [26.0, 27.0, 16.0, 12.5]], np.float32)
    for i, s in enumerate(sources):
        save(out, "source%d" % i, s)
        save(out, "pose%d" % i, posevec[i].reshape(N, 6, 1, 1))
    for s, d in enumerate(disps):
        save(out, "disp%d" % s, d)
    save(out, "target", target)
    save(out, "cams", cams)

    dt = torch.float64
    T = torch.tensor(target, dtype=dt)
    Ss = [torch.tensor(s, dtype=dt) for s in sources]
    P = [torch.tensor(p, dtype=dt, requires_grad=True) for p in posevec]
    D = [torch.tensor(d, dtype=dt, requires_grad=True) for d in disps]
    gsets = [[i for i in range(nsrc) if groups[i] == k] for k in range(max(groups) + 1)] if groups else [list(range(nsrc))]
    idents = [torch.stack([_pe(Ss[i], T, F, torch) for i in gs]).min(0).values for gs in gsets]
    vv, uu = torch.meshgrid(torch.arange(H, dtype=dt), torch.arange(W, dtype=dt), indexing="ij")
    total, masks = 0, []
    imgs = [T]
    for s in range(1, S):
        imgs.append(F.interpolate(imgs[-1], size=(H >> s, W >> s), mode="bilinear", align_corners=False))
    for s in range(S):
        up = D[s] if s == 0 else F.interpolate(D[s], size=(H, W), mode="bilinear", align_corners=False)
        depth = 1.0 / (1.0 / max_d + (1.0 / min_d - 1.0 / max_d) * up)
        errs = []
        for i in range(nsrc):
            R = _rodrigues(P[i][:, :3], torch)
            t = P[i][:, 3:]
            fx, fy, cx, cy = [torch.tensor(cams[:, k], dtype=dt).view(N, 1, 1) for k in range(4)]
            X = (uu - cx) / fx * depth[:, 0]
            Y = (vv - cy) / fy * depth[:, 0]
            Z = depth[:, 0]
            pts = torch.stack([X, Y, Z], 1).view(N, 3, -1)
            Q = R @ pts + t.view(N, 3, 1)
            Qx, Qy, Qz = Q[:, 0].view(N, H, W), Q[:, 1].view(N, H, W), Q[:, 2].view(N, H, W)
            x = fx * Qx / Qz + cx
            y = fy * Qy / Qz + cy
            valid = ((Qz > 1e-3) & (x >= 0) & (x <= W - 1) & (y >= 0) & (y <= H - 1)).to(dt)
            grid = torch.stack([2 * x / (W - 1) - 1, 2 * y / (H - 1) - 1], -1)
            warped = F.grid_sample(Ss[i], grid, mode="bilinear", padding_mode="border", align_corners=True)
            errs.append(_pe(warped, T, F, torch) + (1 - valid[:, None]) * 1e3)
        num, count, mask = 0, 0.0, 0
        for gs, ident in zip(gsets, idents):
            rmin = torch.stack([errs[i] for i in gs]).min(0).values
            m = ((rmin < 1e3) & (rmin < ident)).to(dt).detach()
            num = num + (rmin * m).sum()
            count += float(m.sum())
            mask = torch.maximum(torch.as_tensor(mask, dtype=dt), m)
        photo = num / max(count, 1.0)
        d = D[s]
        dn = d / (d.mean((2, 3), keepdim=True) + 1e-7)
        img = imgs[s]
        gx = (dn[..., 1:] - dn[..., :-1]).abs() * torch.exp(-(img[..., 1:] - img[..., :-1]).abs().mean(1, keepdim=True))
        gy = (dn[..., 1:, :] - dn[..., :-1, :]).abs() * torch.exp(-(img[..., 1:, :] - img[..., :-1, :]).abs().mean(1, keepdim=True))
        smooth = (gx.mean() + gy.mean()) * smooth_w / (2 ** s)
        total = total + photo + smooth
        if guard > 0:
            g = torch.relu(-torch.log(D[s]) - 6) + torch.relu(-torch.log(1 - D[s]) - 6)
            total = total + guard * g.mean()
        masks.append(mask)
    total = total / S
    total.backward()
    save(out, "total", np.array([total.item()]))
    save(out, "mask0", masks[0].numpy())
    for s in range(S):
        save(out, "gdisp%d" % s, D[s].grad.numpy())
    for i in range(nsrc):
        save(out, "gpose%d" % i, P[i].grad.numpy().reshape(N, 6, 1, 1))


def mode_motorcycle(out):
    from skimage import data
    left, right, disp = data.stereo_motorcycle()
    save(out, "left", left.transpose(2, 0, 1)[None].astype(np.float32) / 255.0)
    save(out, "right", right.transpose(2, 0, 1)[None].astype(np.float32) / 255.0)
    d = disp.astype(np.float32)
    d[~np.isfinite(d)] = 0.0      # unknown pixels (inf in the data set) become 0
    save(out, "disp", d[None, None])


def mode_camera(out):
    """A Gaussian dot at a sub-pixel position, shrunk by OpenCV INTER_AREA and
    cropped: where its centroid lands checks the intrinsics' resize and crop."""
    import cv2
    H, W, u, v = 240, 320, 123.3, 77.8
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float64)
    img = np.exp(-((xx - u) ** 2 + (yy - v) ** 2) / (2 * 3.0 ** 2)).astype(np.float32)
    small = cv2.resize(img, (128, 96), interpolation=cv2.INTER_AREA).astype(np.float64)
    sy, sx = np.mgrid[0:96, 0:128]
    cs = [(small * sx).sum() / small.sum(), (small * sy).sum() / small.sum()]
    crop = small[10:80, 20:110]
    cy2, cx2 = np.mgrid[0:70, 0:90]
    cc = [(crop * cx2).sum() / crop.sum(), (crop * cy2).sum() / crop.sum()]
    save(out, "dot", np.array([u, v, cs[0], cs[1], cc[0], cc[1]]))


def mode_rays(out):
    """Normalised image coordinates of every pixel centre, by OpenCV."""
    import cv2
    W, H = 24, 14
    K = np.array([[20.5, 0, 13.7], [0, 18.25, 5.2], [0, 0, 1]], dtype=np.float64)
    vv, uu = np.mgrid[0:H, 0:W].astype(np.float64)
    pts = np.stack([uu.ravel(), vv.ravel()], axis=1).reshape(-1, 1, 2)
    n = cv2.undistortPoints(pts, K, None).reshape(H, W, 2)
    save(out, "rays", n.transpose(2, 0, 1)[None])


def mode_free_space(out):
    """Bounds from two ground planes and the hinge's value and gradient."""
    import cv2
    import torch
    W, H, margin, near, far, reach = 20, 12, 0.1, 0.1, 100.0, 6.0
    K = np.array([[16.0, 0, 9.3], [0, 14.5, 5.2], [0, 0, 1]], dtype=np.float64)
    vv, uu = np.mgrid[0:H, 0:W].astype(np.float64)
    pts = np.stack([uu.ravel(), vv.ravel()], axis=1).reshape(-1, 1, 2)
    rays = cv2.undistortPoints(pts, K, None).reshape(H * W, 2)
    d = np.concatenate([rays, np.ones((H * W, 1))], axis=1)
    planes = []
    for pitch, roll, dist in ((0.15, 0.02, 1.3), (-0.05, -0.1, 0.7)):
        n = np.array([np.sin(roll), np.cos(roll) * np.cos(pitch), np.cos(roll) * np.sin(pitch)])
        planes.append(list(n) + [dist])
    planes = np.array(planes)
    bound = np.zeros((2, 1, H, W))
    for i, p in enumerate(planes):
        nd = d @ p[:3]
        z = np.where(nd > 0, p[3] / np.where(nd > 0, nd, 1), np.inf)   # the ground's z-depth
        bound[i, 0] = np.where((nd > 0) & (z <= reach * p[3]), 1.0 / (z * (1 + margin)), 0.0).reshape(H, W)
    rng = np.random.default_rng(5)
    disp = rng.uniform(0.0, 0.08, size=(2, 1, H, W))
    s_t = torch.tensor(disp, dtype=torch.float64, requires_grad=True)
    b_t = torch.tensor(bound, dtype=torch.float64)
    q = 1.0 / far + (1.0 / near - 1.0 / far) * s_t
    m = b_t > 0
    loss = torch.clamp(1 - q[m] / b_t[m], min=0).mean()
    loss.backward()
    save(out, "planes", planes)
    save(out, "bound", bound)
    save(out, "disp", disp)
    save(out, "loss", np.array([loss.item(), float((q[m] < b_t[m]).double().mean().item())]))
    save(out, "grad", s_t.grad.numpy())
    save(out, "camera", np.array([K[0, 0], K[1, 1], K[0, 2], K[1, 2], W, H, margin, near, far, reach]))


def main():
    if len(sys.argv) != 2 or ":" not in sys.argv[1]:
        sys.exit("usage: losses_ref.py MODE:OUTDIR")
    mode, out = sys.argv[1].split(":", 1)
    modes = {"ssim": mode_ssim, "sample": mode_sample, "rotation": mode_rotation,
             "vsloss": mode_vsloss,
             "vsloss_guard": lambda out: mode_vsloss(out, 0.05),
             "vsloss_offsets": lambda out: mode_vsloss(out, 0.0, [0, 0, 1, 1]), "camera": mode_camera, "motorcycle": mode_motorcycle,
             "rays": mode_rays, "free_space": mode_free_space}
    if mode not in modes:
        sys.exit("losses_ref.py: unknown mode %s" % mode)
    modes[mode](out)


if __name__ == "__main__":
    main()
