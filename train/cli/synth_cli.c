/* train/cli/synth_cli.c — command-line parsing of `nightjar synth`. */
#include "data/synth.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void usage(FILE *f)
{
    fprintf(f,
        "usage: nightjar synth --out DIR [--seed N] [--frames N] [--sequences N] [--stereo]\n"
        "                      [--size WxH] [--moving] [--lead-cart] [--halts] [--turns]\n"
        "                      [--exposure-drift] [--sensor-noise SIGMA] [--fleet]\n"
        "  Renders synthetic robot-yard sequences seen from a moving ground vehicle, with\n"
        "  exact depth and poses, and writes DIR/dataset.json (split by sequence).\n"
        "  --seed N       random seed; the output is a deterministic function of the options (1)\n"
        "  --frames N     frames per sequence, 10 per second (200)\n"
        "  --sequences N  number of sequences; the last is test, the one before val (3)\n"
        "  --stereo       also render a right camera 0.12 m to the right\n"
        "  --size WxH     image size (320x240)\n"
        "  --moving       add a robot that moves independently of the scene\n"
        "  Fleet nuisances (off by default; without them the output does not change):\n"
        "  --lead-cart    a cart driven 6-7 m ahead at the camera's speed (static in the\n"
        "                 image); its pixels as 8-bit masks in <seq>/lead/ (\"lead_mask\")\n"
        "  --halts        at least two stops holding ~1 s per sequence of 8 s or more\n"
        "  --turns        sharp turns: heading rate up to 0.85-0.95 deg per frame\n"
        "  --exposure-drift  per-frame gain, a random walk in [0.85, 1.15]\n"
        "  --sensor-noise SIGMA  Gaussian noise of std SIGMA (0..1 scale) per pixel and\n"
        "                 channel (0 = off)\n"
        "  --fleet        all of them: --lead-cart --halts --turns --exposure-drift\n"
        "                 --sensor-noise 0.01 --moving\n");
}

static int parse_int(const char *s, long lo, long hi, int *out)
{
    char *end;
    long v = strtol(s, &end, 10);
    if (*end || end == s || v < lo || v > hi) return -1;
    *out = (int)v;
    return 0;
}

static int parse_args(int argc, char **argv, nj_synth_config *c)
{
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i], *v = i + 1 < argc ? argv[i + 1] : NULL;
        char *end;
        if (!strcmp(a, "--stereo")) { c->stereo = 1; continue; }
        if (!strcmp(a, "--moving")) { c->moving = 1; continue; }
        if (!strcmp(a, "--lead-cart")) { c->lead_cart = 1; continue; }
        if (!strcmp(a, "--halts")) { c->halts = 1; continue; }
        if (!strcmp(a, "--turns")) { c->turns = 1; continue; }
        if (!strcmp(a, "--exposure-drift")) { c->exposure_drift = 1; continue; }
        if (!strcmp(a, "--fleet")) {
            c->lead_cart = c->halts = c->turns = c->exposure_drift = c->moving = 1;
            c->sensor_noise = 0.01f;
            continue;
        }
        if (!v) return -1;
        i++;
        if (!strcmp(a, "--out")) c->out = v;
        else if (!strcmp(a, "--seed")) {
            c->seed = strtoull(v, &end, 10);
            if (*end || end == v) return -1;
        } else if (!strcmp(a, "--frames")) { if (parse_int(v, 3, 1000000, &c->frames)) return -1; }
        else if (!strcmp(a, "--sequences")) { if (parse_int(v, 1, 1000, &c->sequences)) return -1; }
        else if (!strcmp(a, "--sensor-noise")) {
            c->sensor_noise = strtof(v, &end);
            if (*end || end == v || !(c->sensor_noise >= 0 && c->sensor_noise <= 1)) return -1;
        } else if (!strcmp(a, "--size")) {
            if (sscanf(v, "%dx%d", &c->width, &c->height) != 2) return -1;
        } else return -1;
    }
    return c->out ? 0 : -1;
}

int nj_synth_main(int argc, char **argv)
{
    nj_synth_config c;
    nj_synth_config_default(&c);
    if (argc >= 2 && (!strcmp(argv[1], "--help") || !strcmp(argv[1], "-h"))) {
        usage(stdout);
        return 0;
    }
    if (parse_args(argc, argv, &c)) {
        usage(stderr);
        return 2;
    }
    char err[1024];
    if (nj_synth_run(&c, err, sizeof err)) {
        fprintf(stderr, "nightjar synth: %s\n", err);
        return 1;
    }
    printf("synth: wrote %s/dataset.json\n", c.out);
    return 0;
}
