"""bench/export_cv.py — OpenCV's DNN module (one thread) on an ONNX file written
by `nightjar export --format onnx`, for bench/bench_export.c.

usage: export_cv.py MODEL.onnx FRAME.rgb WIDTH HEIGHT RUNS
FRAME.rgb: one interleaved 8-bit RGB frame.  Runs the net once to warm up,
then RUNS times, each timed alone (CPU time of this process), and prints
"min_seconds_per_frame S" (the fastest run)."""
import sys
import time

import numpy as np


def main():
    import cv2
    path, frame, w, h, runs = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4]), int(sys.argv[5])
    cv2.setNumThreads(1)
    rgb = np.fromfile(frame, dtype=np.uint8).reshape(h, w, 3)
    x = np.ascontiguousarray(rgb.transpose(2, 0, 1)[None].astype(np.float32) / 255.0)
    net = cv2.dnn.readNetFromONNX(path)
    net.setInput(x)
    net.forward(["depth"])
    best = float("inf")
    for _ in range(runs):
        net.setInput(x)
        t0 = time.process_time()
        net.forward(["depth"])
        best = min(best, time.process_time() - t0)
    print("min_seconds_per_frame %.6f" % best)


main()
