"""Outside references for tests/test_data_image.c (OpenCV, scikit-image, NumPy).

usage: data_image.py DIR CASE...   with CASE = WxH:area | WxH:linear | WxH:axes

Writes into DIR natural test images from scikit-image (astronaut 512x512 RGB,
chelsea 451x300 RGB, camera 512x512 grey) as PNG, astronaut as JPEG, the exact
pixel values as float32 .npy (H, W, 3) and, for every case and both colour
images, OpenCV's cv2.resize of the float image (values/255) with INTER_AREA or
INTER_LINEAR, saved as NAME_WxH_MODE.npy.  Mode "axes" resizes one axis at a
time (width first, then height), each with INTER_AREA when that axis shrinks
and INTER_LINEAR when it grows: the per-axis rule, which cv2's INTER_AREA does
not follow when one axis grows and the other shrinks.  The JPEG reference is OpenCV's own
decode (libjpeg), converted to RGB.
"""
import os
import sys

import cv2
import numpy as np
from skimage import data


def main():
    out = sys.argv[1]
    images = {"astronaut": data.astronaut(), "chelsea": data.chelsea()}
    for name, img in images.items():
        cv2.imwrite(os.path.join(out, name + ".png"), cv2.cvtColor(img, cv2.COLOR_RGB2BGR))
        np.save(os.path.join(out, name + "_px.npy"), img.astype(np.float32))
    cam = data.camera()
    cv2.imwrite(os.path.join(out, "camera.png"), cam)
    np.save(os.path.join(out, "camera_px.npy"), cam.astype(np.float32))
    jpg = os.path.join(out, "astronaut.jpg")
    cv2.imwrite(jpg, cv2.cvtColor(images["astronaut"], cv2.COLOR_RGB2BGR), [cv2.IMWRITE_JPEG_QUALITY, 90])
    dec = cv2.cvtColor(cv2.imread(jpg, cv2.IMREAD_COLOR), cv2.COLOR_BGR2RGB)
    np.save(os.path.join(out, "astronaut_jpg_px.npy"), dec.astype(np.float32))
    modes = {"area": cv2.INTER_AREA, "linear": cv2.INTER_LINEAR}
    for case in sys.argv[2:]:
        size, mode = case.split(":")
        w, h = (int(v) for v in size.split("x"))
        for name, img in images.items():
            f = img.astype(np.float32) / 255.0
            if mode == "axes":
                ih, iw = f.shape[:2]
                r = cv2.resize(f, (w, ih), interpolation=cv2.INTER_AREA if w <= iw else cv2.INTER_LINEAR)
                r = cv2.resize(r, (w, h), interpolation=cv2.INTER_AREA if h <= ih else cv2.INTER_LINEAR)
            else:
                r = cv2.resize(f, (w, h), interpolation=modes[mode])
            np.save(os.path.join(out, "%s_%dx%d_%s.npy" % (name, w, h, mode)), r.astype(np.float32))


if __name__ == "__main__":
    main()
