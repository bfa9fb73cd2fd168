/* train/cli/check_data.c — `nightjar check-data DATASET.json`: validates a dataset
 * and reports per sequence; exit status 0 only when training can use it. */
#include "train/cli/check_data.h"
#include "data/dataset.h"
#include <stdlib.h>
#include <string.h>

static void usage(FILE *f)
{
    fprintf(f,
        "usage: nightjar check-data DATASET.json [--k N] [--no-stereo] [--dup-threshold X]\n"
        "  Checks a dataset description and its files: folders, frames (every image is\n"
        "  decoded), sizes, stereo partners, ground truth; reports per sequence the frame\n"
        "  count, resolution, usable samples and near-duplicate frames skipped.\n"
        "  --k N              temporal sources t-N and t+N (default 1; 0 = stereo only)\n"
        "  --no-stereo        ignore stereo partners when counting samples\n"
        "  --dup-threshold X  change below which a frame counts as a duplicate of the last\n"
        "                     kept one (default 0.003; 0 = off): the 90th percentile of the\n"
        "                     grey difference of 32-pixel-wide thumbnails, after dividing out\n"
        "                     the gain change and removing the frames' estimated sensor noise\n"
        "  Exit status: 0 usable, 1 problems found, 2 bad usage.\n");
}

static int parse_args(int argc, char **argv, const char **path, nj_data_options *o)
{
    *path = NULL;
    for (int i = 1; i < argc; i++) {
        const char *a = argv[i];
        char *end = NULL;
        if (!strcmp(a, "--k") && i + 1 < argc) {
            o->k = (int)strtol(argv[++i], &end, 10);
            if (*end || o->k < 0) return -1;
        } else if (!strcmp(a, "--dup-threshold") && i + 1 < argc) {
            o->dup_threshold = strtof(argv[++i], &end);
            if (*end || !(o->dup_threshold >= 0)) return -1;
        } else if (!strcmp(a, "--no-stereo")) {
            o->stereo = 0;
        } else if (a[0] == '-' || *path) {
            return -1;
        } else {
            *path = a;
        }
    }
    return *path ? 0 : -1;
}

int nj_check_data_main(int argc, char **argv)
{
    nj_data_options o;
    nj_data_options_default(&o);
    const char *path;
    if (argc >= 2 && (!strcmp(argv[1], "--help") || !strcmp(argv[1], "-h"))) {
        usage(stdout);
        return 0;
    }
    if (parse_args(argc, argv, &path, &o)) {
        usage(stderr);
        return 2;
    }
    nj_dataset ds;
    nj_problems pr;
    nj_problems_init(&pr);
    int n = nj_dataset_open(path, &o, &ds, &pr);
    nj_dataset_report(&ds, &o, &pr, stdout);
    if (n) printf("check-data: %d problem%s; training cannot use this data\n", n, n == 1 ? "" : "s");
    else printf("check-data: OK; training can use this data\n");
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    return n ? 1 : 0;
}
