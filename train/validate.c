/* train/validate.c — periodic validation: the photometric loss of the model
 * in inference mode on a fixed set of val samples (no augmentation, no
 * tie-break noise, same order every time). */
#include "train/trainer.h"
#include "train/step.h"

int nj_trainer_validate(nj_trainer *t, int max_samples, float *photometric, char *err, size_t errlen)
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
    if (!L) return -1;
    nj_graph_set_grad(t->g, 0);
    nj_graph_set_training(t->g, 0);
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
    }
    nj_graph_set_grad(t->g, 1);
    nj_graph_set_training(t->g, 1);
    nj_loader_destroy(L);
    *photometric = ok ? (float)(sum / ok) : 0.0f;
    return rc;
}
