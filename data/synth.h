/* data/synth.h — synthetic robot-yard sequences with exact ground truth.
 *
 * `nightjar synth --out DIR [--seed N] [--frames N] [--sequences N]
 *  [--stereo] [--size WxH] [--moving]` ray-casts an invented yard — container
 * walls, crates, poles, a perimeter brick wall, a textured ground — seen from a
 * camera moving like a ground vehicle, and writes for every sequence:
 *   DIR/<name>/cam0/NNNNNN.png       frames (8-bit RGB)
 *   DIR/<name>/cam1/NNNNNN.png       right frames with --stereo (baseline 0.12 m)
 *   DIR/<name>/depth/NNNNNN.npy      z-depth in metres along the optical axis (0 = sky)
 *   DIR/<name>/depth16/NNNNNN.png    the same as png16, value/1000 = metres
 *   DIR/<name>/poses.txt             camera-to-world 3x4 row-major per frame
 *   DIR/dataset.json                 the dataset description (data/dataset.h)
 * Camera convention: x right, y down, z forward.  World: y down as well, the
 * ground is the plane y = 0, so a camera at height h sits at y = −h.
 * Output is a deterministic function of the options.
 */
#ifndef NJ_SYNTH_H
#define NJ_SYNTH_H
#include <stdint.h>

typedef struct nj_synth_config {
    const char *out;         /* output folder (created) */
    uint64_t seed;
    int frames;              /* per sequence */
    int sequences;
    int width, height;
    int stereo;              /* also render the right camera */
    int moving;              /* add an independently moving object */
} nj_synth_config;

/* Defaults: seed 1, 200 frames, 3 sequences, 320x240, mono, static scene. */
void nj_synth_config_default(nj_synth_config *c);
/* Renders and writes everything.  Returns 0, or -1 with a message in err. */
int nj_synth_run(const nj_synth_config *c, char *err, unsigned long errlen);
/* The command; argv[0] is "synth".  Returns the exit status. */
int nj_synth_main(int argc, char **argv);

#endif
