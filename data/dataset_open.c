/* data/dataset_open.c — parse + validate a dataset, and the check-data
 * report.  Training calls nj_dataset_open and refuses data with problems. */
#include "data/dataset.h"
#include <stdlib.h>

static int split_samples(const nj_dataset *ds, const nj_data_options *o, nj_split split)
{
    int n = 0;
    for (int i = 0; i < ds->nseq; i++)
        if (ds->seq[i].split == split) n += nj_sequence_samples(&ds->seq[i], o, NULL, i);
    return n;
}

/* Sequences filmed with one calibration resample through one map: a
 * 1920×1080 map takes 16 MiB, and a fleet has many sequences per camera. */
static void share_maps(nj_dataset *ds)
{
    for (int i = 0; i < ds->nseq; i++)
        for (int k = 0; ds->seq[i].undistort && k < 1 + ds->seq[i].rig; k++) {
            nj_undistort *u = &ds->seq[i].undistort[k];
            for (int j = 0; j < i && !u->borrowed; j++)
                for (int m = 0; ds->seq[j].undistort && m < 1 + ds->seq[j].rig && !u->borrowed; m++) {
                    const nj_undistort *o = &ds->seq[j].undistort[m];
                    if (o->borrowed || !nj_undistort_same(u, o)) continue;
                    free(u->map);
                    u->map = o->map;
                    u->borrowed = 1;
                }
        }
}

int nj_dataset_open(const char *path, const nj_data_options *o, nj_dataset *ds, nj_problems *pr)
{
    int before = pr->n;
    if (nj_dataset_parse(path, ds, pr) && ds->nseq == 0) return pr->n - before;
    for (int i = 0; i < ds->nseq; i++) {
        nj_sequence *s = &ds->seq[i];
        nj_sequence_validate(s, o, pr);
        if (!s->problems && s->nframes && !nj_sequence_samples(s, o, NULL, i))
            nj_warning(pr, "%s: sequence \"%s\" yields no samples (%d usable frames, largest offset %d)",
                       s->images, s->name, s->nkept, nj_data_max_offset(o));
    }
    share_maps(ds);
    if (pr->n == before && split_samples(ds, o, NJ_SPLIT_TRAIN) == 0)
        nj_problem(pr, "%s: no usable training samples (needs a \"train\" sequence with at least %d usable frames%s)",
                   path, 2 * nj_data_max_offset(o) + 1, o->stereo ? " or a stereo partner" : "");
    return pr->n - before;
}

static void report_sequence(const nj_sequence *s, const nj_data_options *o, int i, FILE *f)
{
    fprintf(f, "  %-16s %-5s %5d frames  %dx%d", s->name ? s->name : "?", nj_split_name(s->split),
            s->nframes, s->width, s->height);
    if (s->right_images) fprintf(f, "  stereo %.3f m%s", s->baseline, s->rig ? " (raw rig)" : "");
    if (s->depth_dir) fprintf(f, "  depth %s", nj_depth_format_name(s->depth_format));
    if (s->poses) fprintf(f, "  poses");
    if (o->headers_only)   /* no pixels: nothing skipped, the count is an upper bound */
        fprintf(f, "  usable samples at most %d  duplicates not checked", nj_sequence_samples(s, o, NULL, i));
    else
        fprintf(f, "  usable samples %d  duplicates skipped %d", nj_sequence_samples(s, o, NULL, i), s->duplicates);
    if (s->problems) fprintf(f, "  problems %d", s->problems);
    fprintf(f, "\n");
    nj_sequence_lens_describe(s, f);
}

void nj_dataset_report(const nj_dataset *ds, const nj_data_options *o, const nj_problems *pr, FILE *f)
{
    char ks[64] = "none";
    for (int i = 0, n = 0; i < o->noffsets && i < NJ_MAX_OFFSETS; i++)
        n += snprintf(ks + n, sizeof ks - (size_t)n, "%s%d", i ? "," : "", o->offsets[i]);
    fprintf(f, "dataset %s: %d sequence%s (frame offsets %s, stereo %s, duplicate threshold %g%s)\n",
            ds->path ? ds->path : "?", ds->nseq, ds->nseq == 1 ? "" : "s", ks, o->stereo ? "on" : "off",
            o->dup_threshold, o->headers_only ? "; headers only" : "");
    for (int i = 0; i < ds->nseq; i++) report_sequence(&ds->seq[i], o, i, f);
    fprintf(f, "samples%s: train %d, val %d, test %d\n", o->headers_only ? " (at most)" : "",
            split_samples(ds, o, NJ_SPLIT_TRAIN),
            split_samples(ds, o, NJ_SPLIT_VAL), split_samples(ds, o, NJ_SPLIT_TEST));
    nj_problems_print(pr, f);
}
