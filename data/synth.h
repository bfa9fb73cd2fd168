/* data/synth.h — synthetic robot-yard sequences with exact ground truth.
 *
 * `nightjar synth --out DIR [--seed N] [--frames N] [--sequences N]
 *  [--stereo] [--size WxH] [--moving] [--lead-cart] [--halts] [--turns]
 *  [--exposure-drift] [--sensor-noise SIGMA] [--fleet]` ray-casts an invented
 * yard — container walls, crates, poles, a perimeter brick wall, a textured
 * ground — seen from a camera moving like a ground vehicle, and writes for
 * every sequence:
 *   DIR/<name>/cam0/NNNNNN.png       frames (8-bit RGB)
 *   DIR/<name>/lead/NNNNNN.png       with --lead-cart: 8-bit grey mask, 255 where the
 *                                    pixel's first hit is the lead cart, else 0
 *                                    (dataset.json: "lead_mask": "<name>/lead")
 *   DIR/<name>/cam1/NNNNNN.png       right frames with --stereo (baseline 0.12 m)
 *   DIR/<name>/depth/NNNNNN.npy      z-depth in metres along the optical axis (0 = sky)
 *   DIR/<name>/depth16/NNNNNN.png    the same as png16, value/1000 = metres
 *   DIR/<name>/poses.txt             camera-to-world 3x4 row-major per frame
 *   DIR/dataset.json                 the dataset description (data/dataset.h)
 * Camera convention: x right, y down, z forward.  World: y down as well, the
 * ground is the plane y = 0, so a camera at height h sits at y = −h.
 * Output is a deterministic function of the options.
 *
 * Fleet nuisances (what real fleet video has; each drawn per sequence from a
 * generator of its own, so with all of them off the output is byte for byte
 * what it was before they existed):
 *   --lead-cart        a box cart (~1.0 m wide, 1.2 m tall, 1.5 m long, painted
 *                      panels) rigidly attached to the vehicle frame, its rear face
 *                      6–7 m ahead: static in the image up to the camera's shake;
 *                      no object of the yard or the mover overlaps it
 *   --halts            the stops are replaced by at least two (sequences ≥ 8 s)
 *                      stops holding 1.0–1.3 s, one per 10 s beyond 20 s
 *   --turns            sharp turns (2–3 s, one per 6 s) and a curvature bound that
 *                      put the peak heading rate at 0.85–0.95° per frame (printed)
 *   --exposure-drift   colour × a per-frame gain walking by 0.01·N(0,1) per frame,
 *                      clamped to [0.85, 1.15], before quantisation (both cameras)
 *   --sensor-noise S   then + Gaussian noise of std S per pixel and channel (0..1
 *                      values), keyed by sequence, frame and camera
 *   --fleet            all of the above with S = 0.01, and --moving
 */
#ifndef NJ_SYNTH_H
#define NJ_SYNTH_H
#include "data/scene.h"
#include <stdint.h>

typedef struct nj_synth_config {
    const char *out;         /* output folder (created) */
    uint64_t seed;
    int frames;              /* per sequence */
    int sequences;
    int width, height;
    int stereo;              /* also render the right camera */
    int moving;              /* add an independently moving object */
    /* fleet nuisances (all off by default; drawn from a second generator per
       sequence, so the output with all of them off never changes) */
    int lead_cart;           /* a cart riding 6–7 m ahead at the camera's speed, with masks */
    int halts;               /* at least two stops holding ~1 s */
    int turns;               /* sharp turns: heading rate up to 0.85–0.95°/frame */
    int exposure_drift;      /* per-frame gain: random walk in [0.85, 1.15] */
    float sensor_noise;      /* std of Gaussian noise per pixel and channel (0..1 scale), 0 = off */
} nj_synth_config;

/* Defaults: seed 1, 200 frames, 3 sequences, 320x240, mono, static scene. */
void nj_synth_config_default(nj_synth_config *c);
/* Renders and writes everything.  Returns 0, or -1 with a message in err.
 * (The `nightjar synth` command line is train/cli/cmd_synth.c.) */
int nj_synth_run(const nj_synth_config *c, char *err, unsigned long errlen);

/* The yard of sequence idx (0-based: "yard-%02d") exactly as nj_synth_run
 * renders it under c (seed, frames and the nuisances matter; out does not):
 * the analytic geometry behind the frames, for checking a reconstruction
 * against the true scene (nj_scene_distance).  Free with nj_scene_free
 * (data/scene_gen.h).  Returns 0 or -1 (out of memory). */
int nj_synth_yard(const nj_synth_config *c, int idx, nj_scene *s);

#endif
