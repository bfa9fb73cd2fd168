#!/usr/bin/env python3
"""tests/ref/torch_nn.py — PyTorch reference cases for nightjar's differentiable ops.

Usage: /usr/bin/python3 tests/ref/torch_nn.py OUTDIR

Writes one folder per case under OUTDIR and OUTDIR/cases.json listing them.
Each case folder holds:
  meta.json        {"name", "op", "params", "inputs", "state"}
  <input>.npy      float32 inputs, already in nightjar's layouts (NCHW tensors;
                   biases and norm scales as 1xCx1x1; running stats as (C,))
  <state>.npy      float32 buffers an op updates in place (batch-norm running stats)
  gy.npy           upstream gradient for the output
  y.npy            PyTorch's output
  grad_<input>.npy gradient of sum(y * gy) with respect to each input
  <state>_new.npy  the state after the forward pass
PyTorch computes in float64 from the float32 inputs; results are stored float32.
Shapes are random with odd sizes and batch > 1 (fixed seed, so runs repeat).
"""
import json
import os
import sys

try:
    import numpy as np
    import torch
    import torch.nn.functional as F
except ImportError as exc:
    sys.exit("torch_nn.py: cannot import %s (Debian packages python3-numpy and "
             "python3-torch are needed): %s" % (exc.name, exc))

RNG = np.random.default_rng(20240611)
BN_MOMENTUM = 0.1
EPS = 1e-5


def odd(lo, hi):
    """A random odd integer in [lo, hi]."""
    return int(RNG.choice([v for v in range(lo, hi + 1) if v % 2 == 1]))


def normal(shape, scale=1.0, shift=0.0):
    return (RNG.standard_normal(shape) * scale + shift).astype(np.float32)


def uniform(shape, lo, hi):
    return RNG.uniform(lo, hi, shape).astype(np.float32)


class Writer:
    def __init__(self, out):
        self.out = out
        self.names = []

    def case(self, name, op, params, inputs, fn, state=None):
        """inputs: ordered dict name -> float32 array (all get gradients);
        state: name -> float32 array updated in place by fn;
        fn(tensors: dict name -> float64 tensor) -> output tensor."""
        state = state or {}
        folder = "%03d_%s" % (len(self.names), name.replace(" ", "_"))
        path = os.path.join(self.out, folder)
        os.makedirs(path)
        tensors = {}
        for key, arr in inputs.items():
            np.save(os.path.join(path, key + ".npy"), arr)
            tensors[key] = torch.from_numpy(arr.astype(np.float64)).requires_grad_(True)
        for key, arr in state.items():
            np.save(os.path.join(path, key + ".npy"), arr)
            tensors[key] = torch.from_numpy(arr.astype(np.float64))
        y = fn(tensors)
        gy = normal(tuple(y.shape))
        (y * torch.from_numpy(gy.astype(np.float64))).sum().backward()
        np.save(os.path.join(path, "gy.npy"), gy)
        np.save(os.path.join(path, "y.npy"), y.detach().numpy().astype(np.float32))
        for key in inputs:
            g = tensors[key].grad
            if g is None:
                g = torch.zeros_like(tensors[key])
            np.save(os.path.join(path, "grad_" + key + ".npy"), g.numpy().astype(np.float32))
        for key in state:
            np.save(os.path.join(path, key + "_new.npy"), tensors[key].numpy().astype(np.float32))
        meta = {"name": name, "op": op, "params": params,
                "inputs": list(inputs), "state": list(state)}
        with open(os.path.join(path, "meta.json"), "w") as f:
            json.dump(meta, f, indent=1)
        self.names.append(folder)

    def finish(self):
        with open(os.path.join(self.out, "cases.json"), "w") as f:
            json.dump({"count": len(self.names), "cases": self.names}, f, indent=1)


def pad_input(x, pad, mode):
    if pad == 0 or mode == "zero":
        return x
    return F.pad(x, (pad, pad, pad, pad), mode="reflect")


def conv(x, w, b, stride, pad, mode):
    bias = None if b is None else b.reshape(-1)
    if mode == "reflect":
        return F.conv2d(pad_input(x, pad, mode), w, bias, stride=stride)
    return F.conv2d(x, w, bias, stride=stride, padding=pad)


def conv_cases(wr):
    specs = []
    for k in (1, 3, 7):
        for s in (1, 2):
            for mode in (("zero",) if k == 1 else ("zero", "reflect")):
                for bias in (True, False):
                    specs.append((k, k, s, k // 2, mode, bias, ""))
    specs.append((3, 3, 1, 0, "zero", True, " pad0"))
    specs.append((3, 5, 1, 1, "zero", True, ""))
    specs.append((3, 5, 2, 2, "reflect", False, ""))
    for kh, kw, s, pad, mode, bias, extra in specs:
        n, cin, cout = int(RNG.integers(2, 4)), odd(1, 5), odd(3, 7)
        h, w = odd(9, 15), odd(9, 17)
        ks = "k%d" % kh if kh == kw else "k%dx%d" % (kh, kw)
        name = "conv2d %s s%d %s %s%s" % (ks, s, mode, "bias" if bias else "nobias", extra)
        inputs = {"x": normal((n, cin, h, w)), "w": normal((cout, cin, kh, kw), 0.3)}
        if bias:
            inputs["b"] = normal((1, cout, 1, 1), 0.5)
        wr.case(name, "conv2d", {"stride": s, "pad": pad, "mode": mode}, inputs,
                lambda t, s=s, pad=pad, mode=mode: conv(t["x"], t["w"], t.get("b"), s, pad, mode))


def direct_conv_cases(wr):
    """Convs that take nightjar's direct kernels: stride 1 up to 128 output channels
    (every channel-block size, both paddings, several bands, small maps) and beyond
    128 on maps of >= 64 positions, stride 2 with 7x7 or 5x5 kernels and >= 40
    output columns or 3x3 kernels from >= 32 channels onto >= 64 positions, and the
    backward pass of every stride-2 conv (3x3 included); weight gradients along output channels
    (>= 16: vectors of 32 and 16, 9-combination groups spanning channels).  The
    block shape is picked per channel count and map width: among these cases each
    of 12x32, 8x48, 16x16 and 8x32 (channels x positions) is picked, with channel
    remainders of 16, 8, 4 and 1 (e.g. cout 17: 2x 8x48 + 1; cout 33: 2x 12x32 + 8 + 1)."""
    specs = [  # n, cin, h, w, cout, k, stride, pad, mode, bias
        (2, 3, 11, 45, 17, 3, 1, 1, "zero", True),
        (2, 5, 37, 67, 24, 3, 1, 1, "reflect", False),
        (3, 16, 9, 41, 1, 3, 1, 1, "reflect", True),
        (2, 4, 8, 50, 5, 3, 1, 0, "zero", True),
        (2, 3, 7, 47, 6, 5, 1, 2, "reflect", True),
        (2, 6, 3, 44, 40, 3, 1, 1, "reflect", True),
        (2, 2, 6, 13, 3, 3, 1, 1, "zero", False),
        (2, 6, 13, 91, 16, 7, 2, 3, "reflect", True),
        (2, 3, 12, 84, 5, 7, 2, 3, "zero", False),
        (2, 4, 33, 87, 9, 5, 2, 2, "reflect", True),
        (3, 2, 9, 80, 4, 5, 2, 2, "zero", True),
        (2, 7, 6, 20, 40, 3, 1, 1, "reflect", True),
        (2, 5, 11, 30, 33, 3, 2, 1, "zero", True),
        (2, 3, 9, 31, 20, 5, 1, 2, "reflect", False),
        (1, 24, 3, 10, 128, 3, 1, 1, "reflect", True),
        (2, 32, 20, 36, 24, 3, 2, 1, "zero", True),
        (1, 8, 8, 12, 136, 3, 1, 1, "reflect", True),
    ]
    for n, cin, h, w, cout, k, st, pad, mode, bias in specs:
        name = "conv2d direct k%d s%d %s pad%d %dx%d cout %d" % (k, st, mode, pad, h, w, cout)
        inputs = {"x": normal((n, cin, h, w)), "w": normal((cout, cin, k, k), 0.3)}
        if bias:
            inputs["b"] = normal((1, cout, 1, 1), 0.5)
        wr.case(name, "conv2d", {"stride": st, "pad": pad, "mode": mode}, inputs,
                lambda t, st=st, pad=pad, mode=mode: conv(t["x"], t["w"], t.get("b"), st, pad, mode))


def resample_cases(wr):
    x = normal((2, odd(1, 5), odd(3, 7), odd(3, 9)))
    wr.case("upsample2 nearest", "upsample2", {}, {"x": x},
            lambda t: F.interpolate(t["x"], scale_factor=2, mode="nearest"))
    for (ih, iw, oh, ow, what) in ((7, 9, 11, 16, "up"), (13, 15, 5, 8, "down"),
                                   (9, 7, 5, 13, "mixed"), (5, 7, 10, 14, "x2"),
                                   (11, 9, 11, 9, "same")):
        x = normal((3, odd(1, 5), ih, iw))
        wr.case("resize bilinear %s %dx%d to %dx%d" % (what, ih, iw, oh, ow), "resize_bilinear",
                {"oh": oh, "ow": ow}, {"x": x},
                lambda t, oh=oh, ow=ow: F.interpolate(t["x"], size=(oh, ow), mode="bilinear",
                                                      align_corners=False))
    h, w = odd(5, 9), odd(5, 11)
    a, b = normal((2, odd(1, 5), h, w)), normal((2, odd(1, 5), h, w))
    wr.case("concat channels", "concat", {}, {"a": a, "b": b},
            lambda t: torch.cat([t["a"], t["b"]], 1))
    x = normal((3, 7, odd(3, 7), odd(3, 7)))
    wr.case("slice channels 2..6", "slice_channels", {"c0": 2, "count": 4}, {"x": x},
            lambda t: t["x"][:, 2:6])
    for p in (1, 2, 3):
        x = normal((2, odd(1, 5), odd(5, 9), odd(5, 11)))
        wr.case("reflect pad %d" % p, "reflect_pad", {"pad": p}, {"x": x},
                lambda t, p=p: F.pad(t["x"], (p, p, p, p), mode="reflect"))
    x = normal((2, odd(1, 5), odd(5, 11), odd(5, 13)))
    wr.case("avgpool 3x3 s1", "avgpool3", {}, {"x": x},
            lambda t: F.avg_pool2d(t["x"], 3, stride=1))
    x = normal((3, odd(1, 5), odd(3, 9), odd(3, 9)))
    wr.case("global avgpool", "global_avgpool", {}, {"x": x},
            lambda t: F.adaptive_avg_pool2d(t["x"], 1))


def pointwise_cases(wr):
    shape = (3, odd(1, 5), odd(3, 9), odd(3, 9))
    for op, fn in (("relu", F.relu), ("elu", F.elu), ("sigmoid", torch.sigmoid),
                   ("exp", torch.exp), ("abs", torch.abs)):
        wr.case(op, op, {}, {"x": normal(shape, 2.0)}, lambda t, fn=fn: fn(t["x"]))
    for op, fn in (("log", torch.log), ("sqrt", torch.sqrt)):
        wr.case(op, op, {}, {"x": uniform(shape, 0.3, 3.0)}, lambda t, fn=fn: fn(t["x"]))
    wr.case("clamp -0.5 0.7", "clamp", {"lo": -0.5, "hi": 0.7}, {"x": normal(shape)},
            lambda t: torch.clamp(t["x"], -0.5, 0.7))
    wr.case("affine 1.5x-0.25", "affine", {"s": 1.5, "t": -0.25}, {"x": normal(shape)},
            lambda t: 1.5 * t["x"] - 0.25)


def binary_cases(wr):
    n, c, h, w = 2, odd(3, 5), odd(3, 7), odd(3, 9)
    pairs = (("same", (n, c, h, w), (n, c, h, w)),
             ("channel", (n, c, h, w), (1, c, 1, 1)),
             ("both", (n, 1, h, w), (n, c, 1, w)))
    fns = (("add", torch.add), ("sub", torch.sub), ("mul", torch.mul),
           ("div", torch.div), ("minimum", torch.minimum))
    for op, fn in fns:
        for what, sa, sb in pairs:
            b = normal(sb)
            if op == "div":  # keep denominators away from zero
                b = (np.sign(b) * uniform(sb, 0.5, 2.0)).astype(np.float32)
            wr.case("%s broadcast %s" % (op, what), op, {}, {"a": normal(sa), "b": b},
                    lambda t, fn=fn: fn(t["a"], t["b"]))


def reduce_cases(wr):
    dims = {"n": 0, "c": 1, "h": 2, "w": 3}
    x = normal((3, odd(3, 5), odd(3, 7), odd(3, 9)))
    for op in ("sum", "mean"):
        for axes in ("hw", "nc", "c", "nchw"):
            d = tuple(dims[a] for a in axes)
            fn = torch.sum if op == "sum" else torch.mean
            wr.case("%s over %s" % (op, axes), op, {"axes": axes}, {"x": x},
                    lambda t, fn=fn, d=d: fn(t["x"], dim=d, keepdim=True))


def batchnorm(t, training):
    return F.batch_norm(t["x"], t["run_mean"], t["run_var"], t["gamma"].reshape(-1),
                        t["beta"].reshape(-1), training=training, momentum=BN_MOMENTUM, eps=EPS)


def norm_cases(wr):
    for training in (True, False):
        for shape in ((3, odd(3, 7), odd(3, 7), odd(3, 9)), (5, 3, 1, 1)):
            c = shape[1]
            inputs = {"x": normal(shape, 2.0, 0.5), "gamma": normal((1, c, 1, 1), 0.5, 1.0),
                      "beta": normal((1, c, 1, 1), 0.5)}
            state = {"run_mean": normal((c,), 0.3), "run_var": uniform((c,), 0.5, 2.0)}
            name = "batchnorm %s %dx%dx%dx%d" % ("train" if training else "eval", *shape)
            wr.case(name, "batchnorm", {"training": training, "momentum": BN_MOMENTUM, "eps": EPS},
                    inputs, lambda t, tr=training: batchnorm(t, tr), state)
    for groups in (1, 3, 6):
        shape = (2, 6, odd(3, 7), odd(3, 9))
        inputs = {"x": normal(shape, 2.0, 0.5), "gamma": normal((1, 6, 1, 1), 0.5, 1.0),
                  "beta": normal((1, 6, 1, 1), 0.5)}
        wr.case("groupnorm groups %d" % groups, "groupnorm", {"groups": groups, "eps": EPS}, inputs,
                lambda t, g=groups: F.group_norm(t["x"], g, t["gamma"].reshape(-1),
                                                 t["beta"].reshape(-1), eps=EPS))


def encdec(t):
    """Two-level encoder-decoder with one skip connection.  conv1 has no bias:
    batch norm removes it, so its true gradient is zero and a relative
    comparison of it would only compare rounding noise."""
    e1 = F.elu(F.batch_norm(conv(t["x"], t["w1"], None, 2, 1, "reflect"),
                            t["run_mean"], t["run_var"], t["g1"].reshape(-1),
                            t["be1"].reshape(-1), training=True, momentum=BN_MOMENTUM, eps=EPS))
    c2 = conv(e1, t["w2"], t["b2"], 2, 1, "zero")
    cat = torch.cat([F.interpolate(c2, scale_factor=2, mode="nearest"), e1], 1)
    return torch.sigmoid(conv(cat, t["w3"], t["b3"], 1, 1, "reflect"))


def encdec_case(wr):
    # Height and width are multiples of 4 so that two stride-2 convs followed by
    # one x2 upsample land exactly on the first level's size.
    n, cin, c1, c2, cout, h, w = 2, 3, 4, 6, 2, 12, 20
    inputs = {"x": normal((n, cin, h, w)),
              "w1": normal((c1, cin, 3, 3), 0.3),
              "g1": normal((1, c1, 1, 1), 0.3, 1.0), "be1": normal((1, c1, 1, 1), 0.3),
              "w2": normal((c2, c1, 3, 3), 0.3), "b2": normal((1, c2, 1, 1), 0.3),
              "w3": normal((cout, c2 + c1, 3, 3), 0.3), "b3": normal((1, cout, 1, 1), 0.3)}
    state = {"run_mean": normal((c1,), 0.3), "run_var": uniform((c1,), 0.5, 2.0)}
    wr.case("encoder-decoder 2 levels skip", "encdec",
            {"momentum": BN_MOMENTUM, "eps": EPS}, inputs, encdec, state)


def main():
    if len(sys.argv) != 2:
        sys.exit("usage: torch_nn.py OUTDIR")
    torch.manual_seed(0)
    torch.set_num_threads(1)
    wr = Writer(sys.argv[1])
    conv_cases(wr)
    resample_cases(wr)
    pointwise_cases(wr)
    binary_cases(wr)
    reduce_cases(wr)
    norm_cases(wr)
    encdec_case(wr)
    direct_conv_cases(wr)
    wr.finish()


if __name__ == "__main__":
    main()
