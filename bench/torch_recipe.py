#!/usr/bin/env python3
"""bench/torch_recipe.py — nightjar's training recipe written independently in PyTorch.

Same architecture and loss as nightjar's defaults (train/model/model.h, losses/view_synthesis.h):
  depth net  5-stage encoder (3x3 convs, stride 2 then 1, zero padding, widths 16..256) with
             batch norm + ELU; decoder per stage: 3x3 conv (reflection padding) + BN + ELU,
             nearest x2 upsampling, concatenation with the encoder skip, 3x3 conv + BN + ELU;
             sigmoid disparity heads (3x3 conv, reflection padding) at the 4 finest scales.
             Input standardised as (x - 0.45) / 0.225.
  pose net   the two standardised frames on channels, stride-2 convs 7x7, 5x5, 3x3, 3x3, 3x3
             (zero padding, widths 16..256) + BN + ELU, 1x1 conv to 6, spatial mean, x 0.5:
             axis-angle rotation (Rodrigues) and translation, first camera -> second.
  loss       per scale: disparity upsampled (bilinear, half-pixel centres) to full size,
             depth = 1 / (1/100 + (1/0.1 - 1/100) * disp), both sources warped into the target
             (pinhole, border-clamped bilinear sampling), photometric error
             0.85 * clamp((1 - SSIM) / 2, 0, 1) + 0.15 * |a - b| averaged over channels
             (SSIM on 3x3 windows, reflection padding; Wang et al. 2004), +1000 where the
             warp leaves the source view; minimum over sources; auto-mask (Godard et al. 2019):
             only pixels whose minimum beats the un-warped sources' minimum (+1e-5 noise);
             edge-aware smoothness of the mean-normalised disparity against the image pyramid,
             weight 1e-3 / 2^s (Godard et al. 2017).  total = mean over scales.
  step       gradient-norm clipping at 1.0, Adam (lr 1e-4).

Modes (run with Debian's /usr/bin/python3):
  --equiv DIR    load nightjar's initial weights and batch from DIR (written by
                 tests/test_bench_equiv.c), compute the loss and gradients in float64, write
                 DIR/torch_loss.npy and DIR/torch_grad_<param>.npy for every parameter; the
                 same in float32 as DIR/torch32_loss.npy and DIR/torch32_grad_<param>.npy.
  --bench        time the training step: --size WxH --batch N --threads N --steps N --warmup N;
                 ends with the line "ms_per_step=X peak_rss_mb=Y".  With --paced every
                 step (warm-up included) waits for a line on standard input and is followed
                 by a line "step_ms=X" (bench/side_by_side.py alternates step by step).
"""
import argparse
import os
import resource
import statistics
import sys
import time

import numpy as np
import torch
import torch.nn as nn
import torch.nn.functional as F

WIDTHS = [16, 32, 64, 128, 256]
POSE_K = [7, 5, 3, 3, 3]
DEPTH_NEAR, DEPTH_FAR = 0.1, 100.0    # model.depth_range of nightjar's default config
ALPHA, SMOOTH, PENALTY, MIN_Z, TIE = 0.85, 1e-3, 1e3, 1e-3, 1e-5


class Unit(nn.Module):
    """conv (+ batch norm) (+ ELU | sigmoid); padding 'zeros' or 'reflect'."""

    def __init__(self, cin, cout, k, stride, pad_mode, norm=True, act="elu"):
        super().__init__()
        self.pad, self.pad_mode, self.stride = k // 2, pad_mode, stride
        self.conv = nn.Conv2d(cin, cout, k, stride=stride, padding=0)
        self.bn = nn.BatchNorm2d(cout, eps=1e-5, momentum=0.1) if norm else None
        self.act = act

    def forward(self, x):
        if self.pad:
            x = F.pad(x, (self.pad,) * 4, mode="reflect" if self.pad_mode == "reflect" else "constant")
        x = self.conv(x)
        if self.bn is not None:
            x = self.bn(x)
        if self.act == "elu":
            return F.elu(x)
        if self.act == "sigmoid":
            return torch.sigmoid(x)
        return x


def standardise(x):
    return (x - 0.45) / 0.225


class DepthNet(nn.Module):
    def __init__(self):
        super().__init__()
        self.enc = nn.ModuleList()
        cin = 3
        for c in WIDTHS:
            self.enc.append(nn.ModuleList([Unit(cin, c, 3, 2, "zeros"), Unit(c, c, 3, 1, "zeros")]))
            cin = c
        self.dec = nn.ModuleList([None] * len(WIDTHS))
        for i in reversed(range(len(WIDTHS))):
            skip = WIDTHS[i - 1] if i > 0 else 0
            self.dec[i] = nn.ModuleList([Unit(cin, WIDTHS[i], 3, 1, "reflect"),
                                         Unit(WIDTHS[i] + skip, WIDTHS[i], 3, 1, "reflect")])
            cin = WIDTHS[i]
        self.heads = nn.ModuleList([Unit(WIDTHS[s], 1, 3, 1, "reflect", norm=False, act="sigmoid")
                                    for s in range(4)])

    def forward(self, img):
        x, feats = standardise(img), []
        for a, b in self.enc:
            x = b(a(x))
            feats.append(x)
        disp = [None] * 4
        for i in reversed(range(len(WIDTHS))):
            x = F.interpolate(self.dec[i][0](x), scale_factor=2, mode="nearest")
            if i > 0:
                x = torch.cat([x, feats[i - 1]], 1)
            x = self.dec[i][1](x)
            if i < 4:
                disp[i] = self.heads[i](x)
        return disp


class PoseNet(nn.Module):
    def __init__(self):
        super().__init__()
        layers, cin = [], 6
        for k, c in zip(POSE_K, WIDTHS):
            layers.append(Unit(cin, c, k, 2, "zeros"))
            cin = c
        self.convs = nn.ModuleList(layers)
        self.out = Unit(cin, 6, 1, 1, "zeros", norm=False, act=None)

    def forward(self, first, second):
        x = torch.cat([standardise(first), standardise(second)], 1)
        for u in self.convs:
            x = u(x)
        return self.out(x).mean((2, 3)) * 0.5  # model.pose_scale default (train/model/model.c)


def nightjar_names(depth, pose):
    """(module parameter, nightjar parameter name) pairs."""
    pairs = []

    def unit(u, name):
        pairs.extend([(u.conv.weight, name + ".w"), (u.conv.bias, name + ".b")])
        if u.bn is not None:
            pairs.extend([(u.bn.weight, name + ".gamma"), (u.bn.bias, name + ".beta")])

    for i, (a, b) in enumerate(depth.enc):
        unit(a, "enc%d.0" % i)
        unit(b, "enc%d.1" % i)
    for i in range(len(WIDTHS)):
        unit(depth.dec[i][0], "dec%d.0" % i)
        unit(depth.dec[i][1], "dec%d.1" % i)
    for s, h in enumerate(depth.heads):
        unit(h, "head%d" % s)
    for i, u in enumerate(pose.convs):
        unit(u, "pose%d" % i)
    unit(pose.out, "pose.out")
    return pairs


# ---------------------------------------------------------------- loss
def ssim(a, b):
    pad = lambda t: F.pad(t, (1, 1, 1, 1), mode="reflect")
    pa, pb = pad(a), pad(b)
    mu_a, mu_b = F.avg_pool2d(pa, 3, 1), F.avg_pool2d(pb, 3, 1)
    var_a = F.avg_pool2d(pa * pa, 3, 1) - mu_a * mu_a
    var_b = F.avg_pool2d(pb * pb, 3, 1) - mu_b * mu_b
    cov = F.avg_pool2d(pa * pb, 3, 1) - mu_a * mu_b
    c1, c2 = 0.01 ** 2, 0.03 ** 2
    return ((2 * mu_a * mu_b + c1) * (2 * cov + c2)) / ((mu_a * mu_a + mu_b * mu_b + c1) * (var_a + var_b + c2))


def photometric(a, b):
    d = torch.clamp((1 - ssim(a, b)) * 0.5, 0, 1)
    return (ALPHA * d + (1 - ALPHA) * (a - b).abs()).mean(1, keepdim=True)


def rotation(v):
    """Rodrigues: N x 3 axis-angle -> N x 3 x 3 (Taylor series near zero)."""
    t2 = (v * v).sum(1)
    small = t2 < 1e-4
    ts = torch.sqrt(torch.where(small, torch.ones_like(t2), t2))
    A = torch.where(small, 1 - t2 / 6 + t2 * t2 / 120, torch.sin(ts) / ts)
    B = torch.where(small, 0.5 - t2 / 24 + t2 * t2 / 720, (1 - torch.cos(ts)) / torch.where(small, torch.ones_like(t2), t2))
    z = torch.zeros_like(v[:, 0])
    K = torch.stack([z, -v[:, 2], v[:, 1], v[:, 2], z, -v[:, 0], -v[:, 1], v[:, 0], z], 1).view(-1, 3, 3)
    eye = torch.eye(3, dtype=v.dtype).expand_as(K)
    return eye + A.view(-1, 1, 1) * K + B.view(-1, 1, 1) * (K @ K)


def pose_matrix(vec, invert):
    R, t = rotation(vec[:, :3]), vec[:, 3:].unsqueeze(2)
    if invert:
        Rt = R.transpose(1, 2)
        return Rt, -(Rt @ t)
    return R, t


def warp(src, depth, R, t, cams):
    N, _, H, W = src.shape
    dt = depth.dtype
    fx, fy, cx, cy = [cams[:, k].view(N, 1, 1) for k in range(4)]
    v, u = torch.meshgrid(torch.arange(H, dtype=dt), torch.arange(W, dtype=dt), indexing="ij")
    d = depth[:, 0]
    ray = torch.stack([(u - cx) / fx, (v - cy) / fy, torch.ones_like(d)], 1).view(N, 3, -1)
    Q = R @ (ray * d.view(N, 1, -1)) + t
    Qx, Qy, Qz = [Q[:, k].view(N, H, W) for k in range(3)]
    front = Qz > MIN_Z
    z = torch.where(front, Qz, torch.full_like(Qz, MIN_Z))
    x, y = fx * Qx / z + cx, fy * Qy / z + cy
    valid = (front & (x >= 0) & (x <= W - 1) & (y >= 0) & (y <= H - 1)).to(dt)
    grid = torch.stack([2 * x / (W - 1) - 1, 2 * y / (H - 1) - 1], -1)
    out = F.grid_sample(src, grid, mode="bilinear", padding_mode="border", align_corners=True)
    return out, valid.unsqueeze(1)


def smoothness(d, img):
    dn = d / (d.mean((2, 3), keepdim=True) + 1e-7)
    wx = torch.exp(-(img[..., :, 1:] - img[..., :, :-1]).abs().mean(1, keepdim=True))
    wy = torch.exp(-(img[..., 1:, :] - img[..., :-1, :]).abs().mean(1, keepdim=True))
    return ((dn[..., :, 1:] - dn[..., :, :-1]).abs() * wx).mean() + \
           ((dn[..., 1:, :] - dn[..., :-1, :]).abs() * wy).mean()


def recipe_loss(depth_net, pose_net, target, sources, cams, tie_break):
    N, _, H, W = target.shape
    disp = depth_net(target)
    poses = []
    for j, src in enumerate(sources):
        vec = pose_net(src, target) if j == 0 else pose_net(target, src)
        poses.append(pose_matrix(vec, invert=(j == 0)))
    with torch.no_grad():
        ident = torch.stack([photometric(s, target) for s in sources]).min(0).values
        if tie_break:
            ident = ident + torch.randn_like(ident) * TIE
        pyramid = [target]
        for s in range(1, 4):
            pyramid.append(F.interpolate(pyramid[-1], size=(H >> s, W >> s), mode="bilinear", align_corners=False))
    lo, hi = 1 / DEPTH_FAR, 1 / DEPTH_NEAR
    total = 0
    for s in range(4):
        up = disp[s] if s == 0 else F.interpolate(disp[s], size=(H, W), mode="bilinear", align_corners=False)
        depth = 1 / (lo + (hi - lo) * up)
        errs = []
        for src, (R, t) in zip(sources, poses):
            warped, valid = warp(src, depth, R, t, cams)
            errs.append(photometric(warped, target) + (1 - valid) * PENALTY)
        rmin = torch.stack(errs).min(0).values
        mask = ((rmin < PENALTY) & (rmin < ident)).to(rmin.dtype)
        photo = (rmin * mask).sum() / torch.clamp(mask.sum(), min=1.0)
        total = total + photo + smoothness(disp[s], pyramid[s]) * SMOOTH / 2 ** s
    return total / 4


# ---------------------------------------------------------------- modes
def load(dir, name):
    return torch.from_numpy(np.load(os.path.join(dir, name + ".npy")))


def equiv_pass(dir, dtype, prefix):
    """Loss and parameter gradients of nightjar's weights and batch in `dtype`."""
    depth, pose = DepthNet().to(dtype), PoseNet().to(dtype)
    pairs = nightjar_names(depth, pose)
    with torch.no_grad():
        for p, name in pairs:
            p.copy_(load(dir, name).view(p.shape))
    target = load(dir, "target").to(dtype)
    sources = [load(dir, "source%d" % j).to(dtype) for j in range(2)]
    cams = load(dir, "cams").to(dtype)
    loss = recipe_loss(depth, pose, target, sources, cams, tie_break=False)
    loss.backward()
    np.save(os.path.join(dir, prefix + "_loss.npy"), np.array([loss.item()], np.float32))
    for p, name in pairs:
        np.save(os.path.join(dir, "%s_grad_%s.npy" % (prefix, name)), p.grad.numpy().astype(np.float32))


def mode_equiv(dir):
    """float64 (the reference: torch_*) and float32 (torch32_*: how far PyTorch's
    own float32 result lies from it, the noise floor of a float32 comparison)."""
    torch.set_num_threads(1)
    equiv_pass(dir, torch.float64, "torch")
    equiv_pass(dir, torch.float32, "torch32")


def frames(n, h, w):
    """Smooth random texture (random sinusoids plus a little noise) and two copies
    shifted by -2 / +2 pixels, like nightjar's bench frames."""
    g = torch.Generator().manual_seed(5)
    yy, xx = torch.meshgrid(torch.arange(h, dtype=torch.float32), torch.arange(w, dtype=torch.float32), indexing="ij")
    f = torch.rand(n, 3, 6, 2, generator=g) * 0.3 - 0.15
    ph, amp = torch.rand(n, 3, 6, generator=g) * 6.2832, torch.rand(n, 3, 6, generator=g) * 0.08
    imgs = []
    for shift in (0.0, -2.0, 2.0):
        arg = f[..., 0, None, None] * (xx + shift) + f[..., 1, None, None] * yy + ph[..., None, None]
        img = 0.5 + (amp[..., None, None] * torch.sin(arg)).sum(2) + 0.02 * torch.randn(n, 3, h, w, generator=g)
        imgs.append(img.clamp(0, 1))
    return imgs[0], imgs[1:]


def mode_bench(a):
    torch.set_num_threads(a.threads)
    w, h = [int(v) for v in a.size.split("x")]
    depth, pose = DepthNet(), PoseNet()
    params = list(depth.parameters()) + list(pose.parameters())
    opt = torch.optim.Adam(params, lr=1e-4)
    target, sources = frames(a.batch, h, w)
    cams = torch.tensor([[0.58 * w, 1.92 * h, 0.5 * w, 0.5 * h]] * a.batch)
    times = []
    for i in range(a.warmup + a.steps):
        if a.paced and not sys.stdin.readline():
            sys.exit("torch_recipe: --paced: standard input ended before step %d" % (i + 1))
        if i == a.warmup:
            cpu0 = time.process_time()
        t0 = time.perf_counter()
        opt.zero_grad(set_to_none=False)
        loss = recipe_loss(depth, pose, target, sources, cams, tie_break=True)
        loss.backward()
        torch.nn.utils.clip_grad_norm_(params, 1.0)
        opt.step()
        dt = time.perf_counter() - t0
        if i >= a.warmup:
            times.append(dt)
        if a.paced:
            print("step_ms=%.2f" % (dt * 1e3), flush=True)
    cpu = (time.process_time() - cpu0) / a.steps
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print("torch %s, %dx%d batch %d, %d threads; step_ms min %.1f median %.1f max %.1f; last loss %.5f"
          % (torch.__version__, w, h, a.batch, torch.get_num_threads(), min(times) * 1e3,
             statistics.median(times) * 1e3, max(times) * 1e3, loss.item()))
    print("cpu_ms_per_step=%.1f (user + system, all threads)" % (cpu * 1e3))
    print("ms_per_step=%.1f peak_rss_mb=%.1f" % (statistics.median(times) * 1e3, rss))


def main():
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--equiv", metavar="DIR")
    p.add_argument("--bench", action="store_true")
    p.add_argument("--size", default="320x96")
    p.add_argument("--batch", type=int, default=4)
    p.add_argument("--threads", type=int, default=2)
    p.add_argument("--steps", type=int, default=10)
    p.add_argument("--warmup", type=int, default=3)
    p.add_argument("--paced", action="store_true")
    a = p.parse_args()
    if a.equiv:
        mode_equiv(a.equiv)
    elif a.bench:
        mode_bench(a)
    else:
        p.error("give --equiv DIR or --bench")


if __name__ == "__main__":
    main()
