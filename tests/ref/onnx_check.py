"""tests/ref/onnx_check.py — checks an ONNX file written by `nightjar export`
with tools nightjar did not write: onnx.checker (Debian python3-onnx) and
OpenCV's DNN module as the runtime (python3-opencv).

usage: onnx_check.py MODEL.onnx FRAMES.npy EXPECTED_DEPTH.npy [--absrel T]
FRAMES: N x 3 x H x W float32 RGB in [0,1]; EXPECTED: N x H x W depth.
Checks: the checker passes; opset >= 13; input "image" 1x3xHxW and outputs
"disparity", "depth" 1x1xHxW, each with a doc string; OpenCV's output
"depth" for every frame within 1e-4 relative of EXPECTED, and "disparity"
in (0, 1) and consistent with "depth" through the map documented in the
metadata (depth = 1 / (1/far + (1/near - 1/far) * disparity), [near, far] =
the architecture's "depth_range").  With --absrel T (an int8-weight model
against a float reference) the mean relative depth error must be <= T and
not 0 instead.  Exit 0 when all hold,
else 1 with a message."""
import json
import sys

import numpy as np


def fail(msg):
    print("onnx_check: " + msg)
    sys.exit(1)


def dims(value_info):
    return [d.dim_value for d in value_info.type.tensor_type.shape.dim]


def main():
    absrel = None
    if len(sys.argv) == 6 and sys.argv[4] == "--absrel":
        absrel = float(sys.argv[5])
    elif len(sys.argv) != 4:
        fail("usage: onnx_check.py MODEL.onnx FRAMES.npy EXPECTED_DEPTH.npy [--absrel T]")
    try:
        import onnx
        import cv2
    except ImportError as e:
        fail("missing package (%s): apt-get install python3-onnx python3-opencv" % e)
    path, frames, expected = sys.argv[1], np.load(sys.argv[2]), np.load(sys.argv[3])
    model = onnx.load(path)
    onnx.checker.check_model(model, full_check=True)
    opset = [o.version for o in model.opset_import if o.domain in ("", "ai.onnx")]
    if not opset or opset[0] < 13:
        fail("default-domain opset %s < 13" % opset)
    n, _, h, w = frames.shape
    g = model.graph
    ins = {i.name: i for i in g.input}
    outs = {o.name: o for o in g.output}
    if list(ins) != ["image"] or dims(ins["image"]) != [1, 3, h, w] or not ins["image"].doc_string:
        fail("input should be 'image' 1x3x%dx%d with a doc string, got %s" % (h, w, [(k, dims(v)) for k, v in ins.items()]))
    for name in ("disparity", "depth"):
        if name not in outs or dims(outs[name]) != [1, 1, h, w] or not outs[name].doc_string:
            fail("output '%s' 1x1x%dx%d with a doc string is missing" % (name, h, w))
    meta = {p.key: p.value for p in model.metadata_props}
    try:
        arch = json.loads(meta["nightjar.architecture"])
        json.loads(meta["nightjar.training_config"])
        near, far = arch["depth_range"]
        lo, hi = 1.0 / far, 1.0 / near
    except (KeyError, ValueError, TypeError) as e:
        fail("metadata nightjar.architecture / nightjar.training_config missing or not JSON (%s)" % e)
    net = cv2.dnn.readNetFromONNX(path)
    worst, rel_sum = 0.0, 0.0
    for k in range(n):
        net.setInput(np.ascontiguousarray(frames[k:k + 1], dtype=np.float32))
        disp, depth = net.forward(["disparity", "depth"])
        depth = depth.reshape(h, w).astype(np.float64)
        ref = expected[k].astype(np.float64)
        worst = max(worst, float(np.max(np.abs(depth - ref) / np.abs(ref))))
        rel_sum += float(np.mean(np.abs(depth - ref) / np.abs(ref)))
        if not np.all((disp > 0) & (disp < 1)):
            fail("disparity outside (0, 1)")
        mapped = 1.0 / (lo + (hi - lo) * disp.reshape(h, w).astype(np.float64))
        if not np.max(np.abs(mapped - depth) / depth) <= 1e-5:
            fail("depth does not follow the documented map of disparity")
    if absrel is not None:
        mean = rel_sum / n
        print("  measured: OpenCV int8-weight depth vs reference AbsRel %.4g" % mean)
        if not (0 < mean <= absrel):
            fail("AbsRel %.4g not in (0, %g]" % (mean, absrel))
    elif not worst <= 1e-4:
        fail("OpenCV depth differs from the reference: max relative error %.3g > 1e-4" % worst)
    sys.exit(0)


main()
