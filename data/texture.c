/* data/texture.c — materials: concrete with slab joints, gravel (cellular
 * noise), brick pavers and walls, corrugated container steel with rust,
 * wooden planks, striped poles, the robot's hazard stripes, the lead cart's
 * painted panels; lighting; sky. */
#include "data/texture.h"
#include "data/noise.h"
#include <math.h>

static float mixf(float a, float b, float t) { return a + (b - a) * t; }

static void mix3(float out[3], const float a[3], const float b[3], float t)
{
    for (int c = 0; c < 3; c++) out[c] = mixf(a[c], b[c], t);
}

static void scale3(float out[3], float k)
{
    for (int c = 0; c < 3; c++) out[c] *= k;
}

/* How far per-element detail of size `size` has faded to its mean, 0..1:
 * elements shrinking below a few pixels would otherwise alias. */
static float fade_of(float size, float fw)
{
    return nj_smoothstep(0.2f, 0.5f, fw / size);
}

/* Running-bond bricks of size bw×bh with mortar fraction `joint`: returns the
 * brick mask (1 brick, 0 mortar) and a per-brick random value in *id (raw:
 * callers fade the resulting colour with fade_of, never the id itself, so a
 * non-linear use of the id cannot make a surface point change colour with
 * viewing distance). */
static float bricks(float u, float v, float bw, float bh, float joint, float fw, uint32_t seed, float *id)
{
    float row = floorf(v / bh), x = u / bw + 0.5f * (float)((int)row & 1);
    *id = nj_hashf((int)floorf(x), (int)row, 7, seed);
    return nj_filtered_pulse(x, 1 - joint * bh / bw, fw / bw) * nj_filtered_pulse(v / bh, 1 - joint, fw / bh);
}

static void concrete(float x, float z, float fw, uint32_t seed, float rgb[3])
{
    float base = 0.50f + 0.08f * nj_fbm2(x * 0.7f, z * 0.7f, 6, fw * 0.7f, seed) +
                 0.10f * nj_fbm2(x * 5.0f, z * 5.0f, 4, fw * 5.0f, seed + 3);
    float speck = nj_vnoise2(x * 30.0f, z * 30.0f, seed + 4) * (1 - nj_smoothstep(0.25f, 0.5f, fw * 30.0f));
    float stain = nj_smoothstep(0.3f, 0.7f, nj_fbm2(x * 0.5f, z * 0.5f, 4, fw * 0.5f, seed + 5));
    float joint = nj_filtered_pulse(x / 4.0f, 0.99f, fw / 4.0f) * nj_filtered_pulse(z / 4.0f, 0.99f, fw / 4.0f);
    base = (base + 0.06f * speck) * (1 - 0.25f * stain) * (0.6f + 0.4f * joint);
    rgb[0] = base * 1.02f;
    rgb[1] = base;
    rgb[2] = base * 0.94f;
}

static void gravel(float x, float z, float fw, uint32_t seed, float rgb[3])
{
    const float f = 9.0f, mean[3] = {0.47f, 0.44f, 0.40f};
    float detail = 1 - nj_smoothstep(0.2f, 0.5f, fw * f);
    float stone[3] = {mean[0], mean[1], mean[2]};
    if (detail > 0) {
        float f1, f2, id;
        nj_cells2(x * f, z * f, seed + 11, &f1, &f2, &id);
        float soft = fmaxf(0.25f, 1.5f * fw * f);
        float shade = 0.7f + 0.6f * id, crevice = nj_smoothstep(0.0f, soft, f2 - f1);
        float warm = nj_hashf((int)(id * 1e6f), 0, 9, seed);
        float s[3] = {mean[0] * shade * (0.9f + 0.2f * warm), mean[1] * shade, mean[2] * shade * (1.1f - 0.2f * warm)};
        float dark[3] = {0.5f * mean[0], 0.5f * mean[1], 0.5f * mean[2]};
        mix3(s, dark, s, crevice);          /* the same crevice colour on both sides: no jump */
        mix3(stone, mean, s, detail);
    }
    float low = 1 + 0.08f * nj_fbm2(x * 1.3f, z * 1.3f, 4, fw * 1.3f, seed + 13);
    for (int c = 0; c < 3; c++) rgb[c] = stone[c] * low;
}

/* Paver colour for a per-brick random value: red or grey, with a tone. */
static void paver_colour(float id, float rgb[3])
{
    const float red[3] = {0.55f, 0.32f, 0.25f}, grey[3] = {0.50f, 0.48f, 0.45f};
    mix3(rgb, red, grey, 1 - nj_smoothstep(0.25f, 0.35f, id));
    scale3(rgb, 0.8f + 0.35f * id);
}

static void pavers(float x, float z, float fw, uint32_t seed, float rgb[3])
{
    float id, m = bricks(x, z, 0.2f, 0.1f, 0.08f, fw, seed + 17, &id);
    float brick[3], mortar[3] = {0.38f, 0.37f, 0.35f}, fade = fade_of(0.1f, fw);
    paver_colour(id, brick);
    if (fade > 0) {                          /* the mean paver colour over id in [0, 1] */
        float mean[3] = {0, 0, 0}, c[3];
        for (int i = 0; i < 32; i++) {
            paver_colour((i + 0.5f) / 32.0f, c);
            for (int k = 0; k < 3; k++) mean[k] += c[k] / 32.0f;
        }
        mix3(brick, brick, mean, fade);
    }
    scale3(brick, 1 + 0.06f * nj_fbm2(x * 12, z * 12, 3, fw * 12, seed + 19));
    mix3(rgb, mortar, brick, m);
}

static void ground(const nj_scene *s, float x, float z, float fw, float rgb[3])
{
    float zone = nj_fbm2(x * 0.1f, z * 0.1f, 3, fw * 0.1f, s->seed + 21);
    float wg = nj_smoothstep(0.05f, 0.2f, zone), wp = nj_smoothstep(0.05f, 0.2f, -zone - 0.1f);
    concrete(x, z, fw, s->seed, rgb);
    float other[3];
    if (wg > 0) { gravel(x, z, fw, s->seed, other); mix3(rgb, rgb, other, wg); }
    if (wp > 0) { pavers(x, z, fw, s->seed, other); mix3(rgb, rgb, other, wp); }
}

static void container(const nj_object *o, const nj_hit *h, float fw, float rgb[3])
{
    float u = h->u, v = h->v, k = 1;
    if (fabsf(h->n[1]) < 0.5f) {              /* corrugated walls: vertical ribs every 0.3 m */
        float amp = 1 - nj_smoothstep(0.15f, 0.4f, fw / 0.3f);
        k = 0.88f + 0.12f * amp * cosf(6.2831853f * u / 0.3f);
    }
    float dirt = 0.08f * nj_fbm2(u * 1.5f, v * 1.5f, 6, fw * 1.5f, o->seed);
    float rust = nj_smoothstep(0.3f, 0.7f, nj_fbm2(u * 2.0f, v * 0.6f, 5, fw * 2.0f, o->seed + 1));
    float rusty[3] = {0.42f, 0.22f, 0.11f};
    mix3(rgb, o->colour, rusty, 0.7f * rust);
    scale3(rgb, k * (1 + dirt));
}

static void crate(const nj_object *o, const nj_hit *h, float fw, float rgb[3])
{
    float u = h->u, v = h->v, plank = floorf(v / 0.14f);
    float gap = nj_filtered_pulse(v / 0.14f, 0.92f, fw / 0.14f);
    float grain = nj_fbm2(u * 2.0f + plank * 13.1f, v * 30.0f, 5, fw * 30.0f, o->seed);
    float id = nj_hashf((int)plank, 0, 5, o->seed);
    float tone = 0.8f + 0.35f * mixf(id, 0.5f, fade_of(0.14f, fw));   /* linear in id: fading it is exact */
    for (int c = 0; c < 3; c++) rgb[c] = o->colour[c] * tone * (0.85f + 0.15f * grain) * (0.35f + 0.65f * gap);
}

static void pole(const nj_object *o, const nj_hit *h, float fw, float rgb[3])
{
    float v = h->v;
    if (v < 1.5f) {                           /* hazard bands near the base */
        float band = nj_filtered_pulse(v / 0.25f, 0.5f, fw / 0.25f);
        float yellow[3] = {0.92f, 0.78f, 0.12f}, black[3] = {0.08f, 0.08f, 0.08f};
        mix3(rgb, black, yellow, band);
    } else {
        for (int c = 0; c < 3; c++) rgb[c] = o->colour[c];
    }
    scale3(rgb, 1 + 0.1f * nj_fbm2(h->u * 6, v * 6, 4, fw * 6, o->seed));
}

static void wall(const nj_scene *s, const nj_hit *h, float fw, float rgb[3])
{
    float id, m = bricks(h->u, h->v, 0.24f, 0.075f, 0.12f, fw, s->seed + 29, &id);
    float brick[3] = {0.55f, 0.26f, 0.18f}, mortar[3] = {0.62f, 0.60f, 0.56f};
    scale3(brick, 0.75f + 0.45f * mixf(id, 0.5f, fade_of(0.075f, fw)));   /* linear in id */
    mix3(rgb, mortar, brick, m);
    scale3(rgb, 1 + 0.12f * nj_fbm2(h->u * 0.8f, h->v * 0.8f, 6, fw * 0.8f, s->seed + 31));
}

static void robot(const nj_object *o, const nj_hit *h, float fw, float rgb[3])
{
    float stripe = nj_filtered_pulse((h->u + h->v) / 0.2f, 0.5f, fw / 0.2f);
    float black[3] = {0.1f, 0.1f, 0.1f};
    if (h->v < 0.25f) mix3(rgb, black, o->colour, stripe);
    else for (int c = 0; c < 3; c++) rgb[c] = o->colour[c];
    scale3(rgb, 1 + 0.08f * nj_fbm2(h->u * 4, h->v * 4, 4, fw * 4, o->seed));
}

/* The lead cart: painted panels with seams every 0.5 m, a black bumper band,
 * a white-and-paint reflector band, a grey load on top. */
static void cart(const nj_object *o, const nj_hit *h, float fw, float rgb[3])
{
    float u = h->u, v = h->v;
    if (fabsf(h->n[1]) > 0.5f) {
        float g = 0.35f + 0.1f * nj_fbm2(u * 3, v * 3, 4, fw * 3, o->seed);
        rgb[0] = rgb[1] = rgb[2] = g;
        return;
    }
    float seam = nj_filtered_pulse(u / 0.5f + 0.25f, 0.94f, fw / 0.5f);
    for (int c = 0; c < 3; c++) rgb[c] = o->colour[c] * (0.55f + 0.45f * seam);
    if (v < 0.3f) {
        float black[3] = {0.06f, 0.06f, 0.07f};
        mix3(rgb, black, rgb, 0.25f * nj_filtered_pulse(u / 0.1f, 0.5f, fw / 0.1f));
    } else if (v > 0.75f && v < 0.9f) {
        float white[3] = {0.95f, 0.95f, 0.92f};
        mix3(rgb, rgb, white, nj_filtered_pulse((u + v) / 0.2f, 0.5f, fw / 0.2f));
    }
    scale3(rgb, 1 + 0.1f * nj_fbm2(u * 4, v * 4, 4, fw * 4, o->seed + 1));
}

static float light(const nj_scene *s, const nj_hit *h)
{
    float lambert = h->n[0] * s->sun[0] + h->n[1] * s->sun[1] + h->n[2] * s->sun[2];
    float cloud = 0.9f + 0.1f * nj_fbm2(h->p[0] * 0.05f, h->p[2] * 0.05f, 3, 0, s->seed + 37);
    float ao = h->material == NJ_MAT_GROUND ? 1.0f : 0.8f + 0.2f * nj_smoothstep(0.0f, 0.6f, -h->p[1]);
    return (0.45f + 0.6f * (lambert > 0 ? lambert : 0)) * cloud * ao;
}

void nj_shade(const nj_scene *s, const nj_hit *h, float fw, float rgb[3])
{
    switch (h->material) {
    case NJ_MAT_GROUND: ground(s, h->u, h->v, fw, rgb); break;
    case NJ_MAT_CONTAINER: container(h->obj, h, fw, rgb); break;
    case NJ_MAT_CRATE: crate(h->obj, h, fw, rgb); break;
    case NJ_MAT_POLE: pole(h->obj, h, fw, rgb); break;
    case NJ_MAT_WALL: wall(s, h, fw, rgb); break;
    case NJ_MAT_CART: cart(h->obj, h, fw, rgb); break;
    default: robot(h->obj, h, fw, rgb); break;
    }
    float L = light(s, h);
    for (int c = 0; c < 3; c++) {
        float v = rgb[c] * L;
        rgb[c] = v < 0 ? 0 : v > 1 ? 1 : v;
    }
}

void nj_sky(const nj_scene *s, const float d[3], float rgb[3])
{
    float up = -d[1], horizon[3] = {0.78f, 0.83f, 0.88f}, zenith[3] = {0.36f, 0.55f, 0.85f};
    mix3(rgb, horizon, zenith, nj_smoothstep(0.0f, 0.6f, up));
    float k = 1.0f / (fabsf(up) + 0.15f);
    float cloud = nj_smoothstep(0.0f, 0.6f, nj_fbm2(d[0] * k * 2, d[2] * k * 2, 5, 0.002f * k, s->seed + 41));
    float white[3] = {0.95f, 0.95f, 0.96f};
    mix3(rgb, rgb, white, 0.8f * cloud);
}
