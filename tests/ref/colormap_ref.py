#!/usr/bin/env python3
"""tests/ref/colormap_ref.py — outside checks of nightjar's colour map and OKLab.

Usage: /usr/bin/python3 tests/ref/colormap_ref.py DIR

Reads (written by tests/test_colormap.c):
  DIR/table.npy  (256, 3) the "bracken" table, gamma-encoded sRGB in [0, 1]
  DIR/rgb.npy    (N, 3) sample sRGB colours
  DIR/lab.npy    (N, 3) nightjar's OKLab of those colours
Writes DIR/ref.npy (float64):
  [0] max |OKLab difference| between nightjar and this script's OKLab, computed
      by another route: scikit-image's sRGB -> CIE XYZ (D65), then Ottosson's
      published XYZ -> LMS -> OKLab matrices M1, M2 (Ottosson 2020)
  [1] max difference of this script's OKLab from Ottosson's published example
      XYZ/OKLab pairs (validates the route itself)
  [2] smallest step of CIE L* (scikit-image rgb2lab) along the table
  [3] largest / smallest CIEDE2000 step between neighbouring entries
  [4] largest CIELAB chroma along the table (a grey ramp would be ~0)
  [5] CIE L* of the first entry, [6] of the last
"""
import sys

try:
    import numpy as np
    from skimage import color
except ImportError as exc:
    sys.exit("colormap_ref.py: needs numpy and scikit-image (python3-numpy, python3-skimage): %s" % exc)

# M1 (XYZ -> LMS), M2 (LMS' -> OKLab) and the example pairs below are values
# from the literature, written in here, not computed by this script or by an
# outside library: Björn Ottosson, "A perceptual color space for image
# processing" (2020, bottosson.github.io/posts/oklab).  Nothing here re-derives
# them; [1] only checks that the matrices and the pairs agree with each other.
# The pairs are printed there with 3 decimals (hence the 1.5e-3 bound on [1] in
# tests/test_colormap.c); the first XYZ is D65 white.
M1 = np.array([[0.8189330101, 0.3618667424, -0.1288597137],
               [0.0329845436, 0.9293118715, 0.0361456387],
               [0.0482003018, 0.2643662691, 0.6338517070]])
M2 = np.array([[0.2104542553, 0.7936177850, -0.0040720468],
               [1.9779984951, -2.4285922050, 0.4505937099],
               [0.0259040371, 0.7827717662, -0.8086757660]])
PUBLISHED = [  # Ottosson 2020's table of example XYZ -> OKLab pairs (quoted)
             ((0.950, 1.000, 1.089), (1.000, 0.000, 0.000)),
             ((1.000, 0.000, 0.000), (0.450, 1.236, -0.019)),
             ((0.000, 1.000, 0.000), (0.922, -0.671, 0.263)),
             ((0.000, 0.000, 1.000), (0.153, -1.415, -0.449))]


def xyz_to_oklab(xyz):
    lms = np.cbrt(xyz @ M1.T)
    return lms @ M2.T


def main():
    d = sys.argv[1]
    table = np.load(d + "/table.npy").astype(np.float64)
    rgb = np.load(d + "/rgb.npy").astype(np.float64)
    lab_c = np.load(d + "/lab.npy").astype(np.float64)
    ours = xyz_to_oklab(color.rgb2xyz(rgb[None])[0])
    pub = max(np.max(np.abs(xyz_to_oklab(np.array(x)) - np.array(l))) for x, l in PUBLISHED)
    cielab = color.rgb2lab(table[None])[0]
    de = color.deltaE_ciede2000(cielab[:-1], cielab[1:])
    chroma = np.hypot(cielab[:, 1], cielab[:, 2])
    out = [np.max(np.abs(ours - lab_c)), pub, np.min(np.diff(cielab[:, 0])), de.max() / de.min(),
           chroma.max(), cielab[0, 0], cielab[-1, 0]]
    np.save(d + "/ref.npy", np.array(out, dtype=np.float64))


if __name__ == "__main__":
    main()
