/* train/eval/colormap.c — OKLab conversions (Ottosson 2020), the construction
 * of the "bracken" colour map and the depth scaling of every depth picture
 * (see colormap.h). */
#include "train/eval/colormap.h"
#include "train/measure/measure.h"
#include <math.h>
#include <stdlib.h>

#define DENSE 1024               /* samples of the curve for the arc length */
#define NCTRL 4                  /* cubic Bézier */

/* The control points (L, chroma, hue in degrees); why these: colormap.h. */
static const double CTRL[NCTRL][3] = {
    {0.22, 0.040, 135.0},        /* dark moss */
    {0.45, 0.090, 100.0},        /* olive */
    {0.66, 0.150, 55.0},         /* bronze */
    {0.96, 0.040, 85.0},         /* pale straw */
};

static double srgb_decode(double v)
{
    return v <= 0.04045 ? v / 12.92 : pow((v + 0.055) / 1.055, 2.4);
}

float nj_srgb_encode(float linear)
{
    double v = linear <= 0 ? 0 : linear >= 1 ? 1 : linear;
    return (float)(v <= 0.0031308 ? 12.92 * v : 1.055 * pow(v, 1 / 2.4) - 0.055);
}

void nj_srgb_to_oklab(const float rgb[3], float lab[3])
{
    double r = srgb_decode(rgb[0]), g = srgb_decode(rgb[1]), b = srgb_decode(rgb[2]);
    /* linear sRGB → LMS and LMS^(1/3) → Lab: matrices from Ottosson 2020 */
    double l = cbrt(0.4122214708 * r + 0.5363325363 * g + 0.0514459929 * b);
    double m = cbrt(0.2119034982 * r + 0.6806995451 * g + 0.1073969566 * b);
    double s = cbrt(0.0883024619 * r + 0.2817188376 * g + 0.6299787005 * b);
    lab[0] = (float)(0.2104542553 * l + 0.7936177850 * m - 0.0040720468 * s);
    lab[1] = (float)(1.9779984951 * l - 2.4285922050 * m + 0.4505937099 * s);
    lab[2] = (float)(0.0259040371 * l + 0.7827717662 * m - 0.8086757660 * s);
}

static void oklab_to_linear(double L, double a, double b, double lin[3])
{
    /* Lab → LMS^(1/3) and LMS → linear sRGB: matrices from Ottosson 2020 */
    double l = L + 0.3963377774 * a + 0.2158037573 * b;
    double m = L - 0.1055613458 * a - 0.0638541728 * b;
    double s = L - 0.0894841775 * a - 1.2914855480 * b;
    l = l * l * l;
    m = m * m * m;
    s = s * s * s;
    lin[0] = 4.0767416621 * l - 3.3077115913 * m + 0.2309699292 * s;
    lin[1] = -1.2684380046 * l + 2.6097574011 * m - 0.3413193965 * s;
    lin[2] = -0.0041960863 * l - 0.7034186147 * m + 1.7076147010 * s;
}

void nj_oklab_to_linear_srgb(const float lab[3], float lin[3])
{
    double d[3];
    oklab_to_linear(lab[0], lab[1], lab[2], d);
    for (int k = 0; k < 3; k++) lin[k] = (float)d[k];
}

static int in_gamut(double L, double C, double h)
{
    double lin[3];
    oklab_to_linear(L, C * cos(h), C * sin(h), lin);
    for (int k = 0; k < 3; k++)
        if (lin[k] < 0 || lin[k] > 1) return 0;
    return 1;
}


/* The Bézier curve at parameter t, brought into gamut, as OKLab. */
static void curve(double t, double lab[3])
{
    static const double binom[NCTRL] = {1, 3, 3, 1};
    double p[3] = {0, 0, 0};
    for (int i = 0; i < NCTRL; i++) {
        double w = binom[i] * pow(t, i) * pow(1 - t, NCTRL - 1 - i);
        double h = CTRL[i][2] * M_PI / 180.0;
        p[0] += w * CTRL[i][0];
        p[1] += w * CTRL[i][1] * cos(h);
        p[2] += w * CTRL[i][1] * sin(h);
    }
    double L = p[0], C = hypot(p[1], p[2]), h = atan2(p[2], p[1]);
    if (!in_gamut(L, C, h)) {    /* lower only the chroma: lightness and hue stay as designed */
        double lo = 0, hi = C;
        for (int i = 0; i < 40; i++) {
            double mid = 0.5 * (lo + hi);
            if (in_gamut(L, mid, h)) lo = mid;
            else hi = mid;
        }
        C = lo;
    }
    lab[0] = L;
    lab[1] = C * cos(h);
    lab[2] = C * sin(h);
}

static void lab_to_srgb(const double lab[3], float rgb[3])
{
    double lin[3];
    oklab_to_linear(lab[0], lab[1], lab[2], lin);
    for (int k = 0; k < 3; k++) rgb[k] = nj_srgb_encode((float)lin[k]);
}

void nj_colormap_table(float lut[NJ_COLORMAP_SIZE][3])
{
    double cum[DENSE + 1], prev[3], cur[3];
    curve(0, prev);
    cum[0] = 0;
    for (int i = 1; i <= DENSE; i++) {       /* arc length in OKLab */
        curve((double)i / DENSE, cur);
        double d0 = cur[0] - prev[0], d1 = cur[1] - prev[1], d2 = cur[2] - prev[2];
        cum[i] = cum[i - 1] + sqrt(d0 * d0 + d1 * d1 + d2 * d2);
        for (int k = 0; k < 3; k++) prev[k] = cur[k];
    }
    int seg = 0;
    for (int j = 0; j < NJ_COLORMAP_SIZE; j++) {
        double target = cum[DENSE] * j / (NJ_COLORMAP_SIZE - 1);
        while (seg < DENSE - 1 && cum[seg + 1] < target) seg++;
        double span = cum[seg + 1] - cum[seg];
        double f = span > 0 ? (target - cum[seg]) / span : 0;
        if (f > 1) f = 1;
        double lab[3];
        curve((seg + f) / DENSE, lab);
        lab_to_srgb(lab, lut[j]);
    }
}

/* ---- depth scaling -------------------------------------------------------------- */

static int valid_depth(float d)
{
    return isfinite(d) && d > 0;
}

long nj_depth_scale_fit(const float *depth, size_t n, nj_depth_scale *s)
{
    s->near = s->far = 1.0f;
    float *tmp = malloc((n ? n : 1) * sizeof *tmp);
    if (!tmp) return -1;
    size_t k = 0;
    for (size_t i = 0; i < n; i++)
        if (valid_depth(depth[i])) tmp[k++] = depth[i];
    if (k) {
        /* nj_quantile reorders its input; both calls see the same multiset */
        s->near = (float)nj_quantile(tmp, k, NJ_DEPTH_SCALE_NEAR_Q);
        s->far = (float)nj_quantile(tmp, k, NJ_DEPTH_SCALE_FAR_Q);
    }
    free(tmp);
    return (long)k;
}

float nj_depth_scale_pos(nj_depth_scale s, float depth)
{
    if (!valid_depth(depth)) return NAN;
    if (!(s.far > s.near) || !(s.near > 0)) return 0.5f;   /* flat picture: the middle colour */
    double t = (log(depth) - log(s.near)) / (log(s.far) - log(s.near));
    return (float)(t < 0 ? 0 : t > 1 ? 1 : t);
}

float nj_depth_scale_depth(nj_depth_scale s, float t)
{
    if (!(s.far > s.near) || !(s.near > 0)) return s.near;
    return (float)exp(log(s.near) + (double)t * (log(s.far) - log(s.near)));
}

void nj_depth_colour(const float lut[NJ_COLORMAP_SIZE][3], nj_depth_scale s, float depth, float rgb[3])
{
    float t = nj_depth_scale_pos(s, depth);
    if (isnan(t)) {
        rgb[0] = NJ_NO_DEPTH_R;
        rgb[1] = NJ_NO_DEPTH_G;
        rgb[2] = NJ_NO_DEPTH_B;
        return;
    }
    long k = lroundf(t * (NJ_COLORMAP_SIZE - 1));
    for (int c = 0; c < 3; c++) rgb[c] = lut[k][c];
}

int nj_depth_image(const float *depth, int w, int h, nj_depth_scale s, nj_image *out)
{
    float lut[NJ_COLORMAP_SIZE][3];
    if (nj_image_alloc(out, w, h)) return -1;
    nj_colormap_table(lut);
    size_t n = (size_t)w * h;
    for (size_t i = 0; i < n; i++) {
        float rgb[3];
        nj_depth_colour(lut, s, depth[i], rgb);
        for (int c = 0; c < 3; c++) out->data[c * n + i] = rgb[c];
    }
    return 0;
}
