/* data/samples.c — training samples from the kept frames of each sequence:
 * target t with sources t−k and t+k (within the same sequence, counted over
 * the frames kept after duplicate skipping) and/or the stereo partner. */
#include "data/dataset.h"
#include <stdlib.h>

int nj_sequence_samples(const nj_sequence *s, const nj_data_options *o, nj_sample *out, int seq)
{
    int stereo = o->stereo && s->right_images != NULL;
    int k = o->k > 0 ? o->k : 0;
    if (!k && !stereo) return 0;
    int count = 0;
    for (int j = k; j + k < s->nkept; j++) {
        if (out) {
            nj_sample *p = &out[count];
            p->seq = seq;
            p->target = s->kept[j];
            p->nsrc = k ? 2 : 0;
            p->src[0] = k ? s->kept[j - k] : -1;
            p->src[1] = k ? s->kept[j + k] : -1;
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
