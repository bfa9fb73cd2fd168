/* train/loop/validate.c — periodic validation: the photometric loss of the model
 * in inference mode on a fixed set of val samples (no augmentation, no
 * tie-break noise, same order every time), and, where the val sequences have
 * ground-truth depth, the depth metrics of train/measure/metrics.h at the training
 * resolution (ground truth resampled nearest-neighbour so unknown pixels stay
 * unknown; per-image median scaling for monocular models, none for
 * stereo-only ones). */
#include "train/loop/trainer.h"
#include "losses/depth.h"
#include "train/measure/measure.h"
#include "train/loop/step.h"
#include <stdlib.h>

/* Ground truth of batch item i resampled to the batch size; 0 when none. */
static int item_truth(const nj_trainer *t, const nj_batch *b, int i, float *gt)
{
    const nj_sample *sm = &t->val[b->sample[i]];
    const nj_sequence *q = &t->ds.seq[sm->seq];
    if (!q->depth_dir) return 0;
    char *path = nj_depth_path(q, sm->target), err[256];
    float *d = NULL;
    int dw, dh;
    int rc = path ? nj_depth_read(path, q->depth_format, q->depth_scale, &d, &dw, &dh, err, sizeof err) : -1;
    free(path);
    if (rc) return 0;
    for (int y = 0; y < b->h; y++)
        for (int x = 0; x < b->w; x++)
            gt[y * b->w + x] = d[(int)((y + 0.5) * dh / b->h) * dw + (int)((x + 0.5) * dw / b->w)];
    free(d);
    return 1;
}

/* Adds the depth metrics of every item of a validated batch with ground truth. */
static void add_depth_metrics(const nj_trainer *t, const nj_batch *b, const nj_tensor *disp,
                              nj_metrics_acc *acc, float *buf)
{
    size_t n = (size_t)b->w * b->h;
    float *gt = buf, *pred = buf + n, *gsel = buf + 2 * n, *psel = buf + 3 * n;
    int metric = t->cfg.stereo && !t->cfg.video;
    for (int i = 0; i < b->n; i++) {
        if (!item_truth(t, b, i, gt)) continue;
        for (size_t k = 0; k < n; k++)
            pred[k] = nj_depth_from_disparity_value(disp->data[i * n + k], t->model.cfg.depth_range);
        size_t m = nj_depth_select(gt, pred, n, (float)NJ_EVAL_DEPTH_FLOOR, NJ_EVAL_DEPTH_CAP, gsel, psel);
        double scale = metric ? 1.0 : nj_median_scale(gsel, psel, m, gt);
        nj_depth_metrics dm;
        if (m && scale > 0 && nj_depth_metrics_compute(gsel, psel, m, scale, (float)NJ_EVAL_DEPTH_FLOOR,
                                                       NJ_EVAL_DEPTH_CAP, &dm) == 0)
            nj_metrics_acc_add(acc, &dm, scale);
    }
}

int nj_trainer_validate(nj_trainer *t, int max_samples, nj_val_result *res, char *err, size_t errlen)
{
    nj_loader_config lc;
    nj_loader_config_default(&lc);
    lc.width = t->cfg.width;
    lc.height = t->cfg.height;
    lc.batch = t->cfg.batch;
    lc.seed = 12345;
    lc.jitter = 0;
    lc.flip_prob = 0;
    int n = t->nval < max_samples ? t->nval : max_samples;
    int steps = (n + lc.batch - 1) / lc.batch;
    nj_loader *L = nj_loader_create(&t->ds, t->val, n, &lc, err, errlen);
    float *buf = malloc(sizeof(float) * 4 * (size_t)lc.width * lc.height);
    if (!L || !buf) { free(buf); if (L) nj_loader_destroy(L); return -1; }
    nj_graph_set_grad(t->g, 0);
    nj_graph_set_training(t->g, 0);
    nj_metrics_acc acc;
    nj_metrics_acc_init(&acc);
    double sum = 0;
    int ok = 0, rc = 0;
    for (int s = 0; s < steps; s++) {
        const nj_batch *b = nj_loader_next(L, err, errlen);
        if (!b) { rc = -1; break; }
        nj_step_result r;
        nj_graph_reset(t->g);
        if (nj_train_step(t->g, &t->model, &t->cfg, b, NULL, 0, &r)) {
            snprintf(err, errlen, "%s", nj_graph_error(t->g));
            rc = -1;
            break;
        }
        sum += r.photometric;
        ok++;
        add_depth_metrics(t, b, r.disp0, &acc, buf);
    }
    nj_graph_set_grad(t->g, 1);
    nj_graph_set_training(t->g, 1);
    nj_loader_destroy(L);
    free(buf);
    res->photometric = ok ? (float)(sum / ok) : 0.0f;
    res->depth_images = acc.images;
    double sm, ss;
    nj_metrics_acc_result(&acc, &res->depth, &sm, &ss);
    return rc;
}
