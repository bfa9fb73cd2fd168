/* data/samples.c — training samples from the kept frames of each sequence:
 * target t with sources t−k and t+k for every offset k of the options (within
 * the same sequence, counted over the frames kept after duplicate skipping)
 * and/or the stereo partner.  Every sample has all of its offsets' sources, so
 * a target needs the largest offset's room on both sides. */
#include "data/dataset.h"
#include <stdlib.h>

int nj_data_max_offset(const nj_data_options *o)
{
    int k = 0;
    for (int i = 0; i < o->noffsets && i < NJ_MAX_OFFSETS; i++)
        if (o->offsets[i] > k) k = o->offsets[i];
    return k;
}

int nj_sequence_samples(const nj_sequence *s, const nj_data_options *o, nj_sample *out, int seq)
{
    int stereo = o->stereo && s->right_images != NULL;
    int k = nj_data_max_offset(o);
    int nk = k > 0 ? (o->noffsets < NJ_MAX_OFFSETS ? o->noffsets : NJ_MAX_OFFSETS) : 0;
    if (!k && !stereo) return 0;
    int count = 0;
    for (int j = k; j + k < s->nkept; j++) {
        if (out) {
            nj_sample *p = &out[count];
            p->seq = seq;
            p->target = s->kept[j];
            p->nsrc = 2 * nk;
            for (int i = 0; i < 2 * NJ_MAX_OFFSETS; i++) p->src[i] = -1;
            for (int i = 0; i < nk; i++) {
                p->src[2 * i] = s->kept[j - o->offsets[i]];
                p->src[2 * i + 1] = s->kept[j + o->offsets[i]];
            }
            p->stereo = stereo;
        }
        count++;
    }
    return count;
}

int nj_dataset_samples(const nj_dataset *ds, nj_split split, const nj_data_options *o, nj_sample **out)
{
    int total = 0;
    for (int i = 0; i < ds->nseq; i++)
        if (ds->seq[i].split == split) total += nj_sequence_samples(&ds->seq[i], o, NULL, i);
    *out = malloc((size_t)(total ? total : 1) * sizeof(nj_sample));
    if (!*out) return -1;
    int n = 0;
    for (int i = 0; i < ds->nseq; i++)
        if (ds->seq[i].split == split) n += nj_sequence_samples(&ds->seq[i], o, *out + n, i);
    return n;
}
