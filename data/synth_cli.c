/* data/synth_cli.c — command-line parsing of `nightjar synth`. */
#include "data/synth.h"
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static void usage(FILE *f)
{
    fprintf(f,
        "usage: nightjar synth --out DIR [--seed N] [--frames N] [--sequences N] [--stereo]\n"
        "                      [--size WxH] [--moving]\n"
        "  Renders synthetic robot-yard sequences seen from a moving ground vehicle, with\n"
        "  exact depth and poses, and writes DIR/dataset.json (split by sequence).\n"
        "  --seed N       random seed; the output is a deterministic function of the options (1)\n"
        "  --frames N     frames per sequence, 10 per second (200)\n"
        "  --sequences N  number of sequences; the last is test, the one before val (3)\n"
        "  --stereo       also render a right camera 0.12 m to the right\n"
        "  --size WxH     image size (320x240)\n"
        "  --moving       add a robot that moves independently of the scene\n");
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
        if (!v) return -1;
        i++;
        if (!strcmp(a, "--out")) c->out = v;
        else if (!strcmp(a, "--seed")) {
            c->seed = strtoull(v, &end, 10);
            if (*end || end == v) return -1;
        } else if (!strcmp(a, "--frames")) { if (parse_int(v, 3, 1000000, &c->frames)) return -1; }
        else if (!strcmp(a, "--sequences")) { if (parse_int(v, 1, 1000, &c->sequences)) return -1; }
        else if (!strcmp(a, "--size")) {
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
