/* train/loop/trainer.c — the training loop: steps, learning-rate schedule,
 * gradient clipping, NaN/Inf handling, logging, validation, checkpoints,
 * budgets and signals. */
#include "train/loop/trainer.h"
#include "nn/testhook.h"
#include "train/loop/runfiles.h"
#include "train/loop/step.h"
#include "train/loop/trainer_dist.h"
#include "train/loop/step_replicas.h"
#include <math.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

/* Set by SIGINT/SIGTERM; the loop finishes its step, saves and exits. */
static volatile sig_atomic_t stop_signal;

static void on_signal(int sig)
{
    stop_signal = sig;
    nj_trainer_dist_signal_note();
}

static double now_elapsed(const nj_trainer *t)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return t->elapsed0 + (ts.tv_sec + ts.tv_nsec * 1e-9 - t->wall0);
}

int nj_trainer_save(nj_trainer *t, const char *name, char *err, size_t errlen)
{
    char path[NJ_PATH_MAX + 64];
    if (t->rank != 0) return 0;             /* rank 0 writes for the whole job */
    t->st.adam_step = t->opt.step;
    t->st.rng[0] = t->rng.s[0];
    t->st.rng[1] = t->rng.s[1];
    t->st.loader_cursor = t->st.step * t->cfg.batch * t->ranks;
    t->st.elapsed_seconds = now_elapsed(t);
    if (name) snprintf(path, sizeof path, "%s/%s", t->dir, name);
    else nj_run_step_path(t->dir, t->st.step, path, sizeof path);
    if (nj_checkpoint_save(path, &t->model, &t->cfg, &t->st, err, errlen)) return -1;
    if (!name) nj_run_prune(t->dir, t->cfg.keep_last > 0 ? t->cfg.keep_last : 1);
    return 0;
}

/* Global L2 norm of all gradients; non-finite when any gradient is. */
/* Fixes the LR schedule's horizon of a time-budgeted run once the speed is
 * known: at step max(warm-up, 100), from the time per step since step 10 (the
 * first steps are slowed by start-up).  Saved in checkpoints, so a resumed run
 * keeps the same schedule. */
static void fix_schedule(nj_trainer *t)
{
    if (t->st.schedule_steps > 0 || t->cfg.minutes <= 0) return;
    long at = t->cfg.warmup_steps > 100 ? t->cfg.warmup_steps : 100;
    if (t->st.step == 10) t->t10 = now_elapsed(t);
    if (t->st.step < at || t->t10 <= 0) return;
    double per_step = (now_elapsed(t) - t->t10) / (double)(t->st.step - 10);
    t->st.schedule_steps = t->st.step + (long)((t->cfg.minutes * 60.0 - now_elapsed(t)) / per_step);
    if (t->cfg.max_steps > 0 && t->cfg.max_steps < t->st.schedule_steps)
        t->st.schedule_steps = t->cfg.max_steps;
}

/* Recoveries (reload + halved LR) allowed in one run before giving up. */
#define MAX_NAN_RECOVERIES 6

/* Test hook nonfinite=STEP:COUNT (nn/testhook.h): the next COUNT losses from
 * STEP on are NaN, so the recovery path below can be exercised end to end. */
static void parse_fault_hook(nj_trainer *t)
{
    long v[2];
    t->fault_left = 0;
    if (nj_test_hook("nonfinite", v) == 2 && v[1] > 0 && v[1] < 1000000) {
        t->fault_step = v[0];
        t->fault_left = (int)v[1];
    }
}

static void inject_fault(nj_trainer *t, nj_step_result *r)
{
    if (t->fault_left > 0 && t->st.step >= t->fault_step) {
        r->loss = NAN;
        t->fault_left--;
    }
}

/* NaN/Inf: skip; after 3 in a row reload the last good checkpoint, halve the LR. */
static int handle_bad_step(nj_trainer *t, const char *what)
{
    t->bad_steps++;
    char line[256], err[512];
    snprintf(line, sizeof line, "{\"type\":\"nonfinite\",\"step\":%ld,\"what\":\"%s\"}", t->st.step, what);
    nj_runlog_json(&t->log, line);
    nj_runlog_say(&t->log, "step %ld: non-finite %s, update skipped", t->st.step, what);
    if (t->bad_steps < 3) return 0;
    float scale = t->st.lr_scale * 0.5f;
    int recoveries = t->st.nan_recoveries + 1;
    if (recoveries > MAX_NAN_RECOVERIES) {
        nj_runlog_say(&t->log, "non-finite steps persist after %d recoveries with halved learning rates; "
                      "stopping without saving (the last good checkpoint is kept)", MAX_NAN_RECOVERIES);
        return -1;
    }
    int r = nj_trainer_load_latest(t, err, sizeof err);
    if (r != 0) {
        nj_runlog_say(&t->log, "repeated non-finite steps and no checkpoint to go back to; stopping");
        return -1;
    }
    t->st.lr_scale = scale;
    t->st.nan_recoveries = recoveries;
    nj_params_freeze_group(&t->model.params, NJ_GROUP_ENCODER, t->cfg.freeze_encoder);
    t->opt.step = t->st.adam_step;
    t->bad_steps = 0;
    nj_loader_destroy(t->loader);
    t->loader = NULL;
    nj_runlog_say(&t->log, "reloaded the checkpoint of step %ld with the learning rate halved (x%.3g)",
                  t->st.step, t->st.lr_scale);
    return 1;   /* caller restarts the loader */
}

static void log_step(nj_trainer *t, const nj_step_result *r, float lr, double ips, int epoch_len)
{
    char line[1024], health[64];
    double el = now_elapsed(t);
    snprintf(line, sizeof line,
             "{\"type\":\"step\",\"step\":%ld,\"epoch\":%.3f,\"loss\":%.6g,\"photometric\":%.6g,"
             "\"smoothness\":%.6g,\"lr\":%.6g,\"images_per_s\":%.3f,\"mask_kept\":%.4f,"
             "\"saturated\":%.4f,\"translation\":%.6g,\"elapsed_s\":%.1f,\"health\":\"%s\"}",
             t->st.step, (double)t->st.step * t->cfg.batch * t->ranks / epoch_len, r->loss, r->photometric,
             r->smoothness, lr, ips, r->mask_fraction, r->saturated, r->translation, el,
             nj_health_summary(&t->health, health, sizeof health));
    const nj_disp_figures *f = &t->health.disp;   /* the drift alarm's figures (health.h) */
    if (t->health.have_disp && strlen(line) > 1)
        snprintf(line + strlen(line) - 1, sizeof line - strlen(line) + 1,
                 ",\"inverted\":%.4f,\"far_half\":%.4f,\"depth_p50\":%.4g}", f->inverted, f->far_half,
                 f->depth_p50);
    /* the pose net's motion per frame at the widest offset over the smallest's (step.h) */
    if (r->pace_near > 0 && strlen(line) > 1)
        snprintf(line + strlen(line) - 1, sizeof line - strlen(line) + 1, ",\"gap\":%.4f}", r->pace_far / r->pace_near);
    if (t->cfg.rotation_pairs > 0 && strlen(line) > 1)
        snprintf(line + strlen(line) - 1, sizeof line - strlen(line) + 1, ",\"rotation_lesson\":%.4g}", r->rotation_lesson);
    if (t->cfg.free_space > 0 && strlen(line) > 1)
        snprintf(line + strlen(line) - 1, sizeof line - strlen(line) + 1, ",\"beyond_ground\":%.4g}", r->free_space);
    nj_runlog_json(&t->log, line);
}

static void progress(nj_trainer *t, const nj_step_result *r, float lr, double ips, int epoch_len)
{
    char text[512], eta[32] = "";
    double el = now_elapsed(t);
    if (t->cfg.minutes > 0) {
        double left = t->cfg.minutes * 60 - el;
        snprintf(eta, sizeof eta, " eta %dm%02ds", (int)(left / 60), (int)fmod(left > 0 ? left : 0, 60));
    } else if (t->cfg.max_steps > 0 && ips > 0) {
        double left = (double)(t->cfg.max_steps - t->st.step) * t->cfg.batch * t->ranks / ips;
        snprintf(eta, sizeof eta, " eta %dm%02ds", (int)(left / 60), (int)fmod(left, 60));
    }
    snprintf(text, sizeof text, "step %ld epoch %.2f loss %.4f photo %.4f smooth %.5f lr %.2g %.1f img/s%s",
             t->st.step, (double)t->st.step * t->cfg.batch * t->ranks / epoch_len, r->loss, r->photometric,
             r->smoothness, lr, ips, eta);
    nj_runlog_progress(&t->log, text);
}

static void check_health(nj_trainer *t, const nj_step_result *r)
{
    /* the drift alarm's figures come from this step's scale-0 disparity */
    const nj_tensor *d = r->disp0;
    nj_disp_figures df;
    if (d) nj_health_disp_figures(d->data, d->n, d->h, d->w, t->model.cfg.depth_range, &df);
    int fired = nj_health_observe(&t->health, t->st.step, r->loss, r->saturated, r->translation,
                                  r->mask_fraction, d ? &df : NULL);
    for (int bit = 1; bit <= NJ_HEALTH_LAST; bit <<= 1)
        if (fired & bit) {
            char line[512];
            nj_runlog_say(&t->log, "health: %s", nj_health_message(bit));
            snprintf(line, sizeof line, "{\"type\":\"health\",\"step\":%ld,\"message\":\"%s\"}",
                     t->st.step, nj_health_message(bit));
            nj_runlog_json(&t->log, line);
        }
}

static int validate(nj_trainer *t)
{
    if (t->nval == 0 || t->rank != 0) return 0;
    nj_val_result v;
    char err[512], line[512], depth[256] = "";
    if (nj_trainer_validate(t, 64, &v, err, sizeof err)) {
        nj_runlog_say(&t->log, "validation failed: %s", err);
        return -1;
    }
    float photo = v.photometric;
    t->last_val = photo;
    if (v.depth_images > 0)
        snprintf(depth, sizeof depth, ",\"absrel\":%.6g,\"rmse\":%.6g,\"rmse_log\":%.6g,\"delta_1_25\":%.6g,"
                 "\"depth_images\":%d", v.depth.absrel, v.depth.rmse, v.depth.rmse_log, v.depth.delta1,
                 v.depth_images);
    snprintf(line, sizeof line, "{\"type\":\"val\",\"step\":%ld,\"photometric\":%.6g%s,\"elapsed_s\":%.1f}",
             t->st.step, photo, depth, now_elapsed(t));
    nj_runlog_json(&t->log, line);
    if (v.depth_images > 0)
        nj_runlog_say(&t->log, "validation at step %ld: photometric %.5f, AbsRel %.4f, d<1.25 %.3f (%d images)%s",
                      t->st.step, photo, v.depth.absrel, v.depth.delta1, v.depth_images,
                      photo < t->st.best_val ? " (best so far)" : "");
    else
        nj_runlog_say(&t->log, "validation at step %ld: photometric %.5f%s", t->st.step, photo,
                      photo < t->st.best_val ? " (best so far)" : "");
    if (photo < t->st.best_val) {
        t->st.best_val = photo;
        if (nj_trainer_save(t, "best.ckpt", err, sizeof err)) {
            nj_trainer_write_failed(t, err);
            return -1;
        }
    }
    if (t->write_report && t->write_report(t->dir, err, sizeof err))
        nj_runlog_say(&t->log, "report not written: %s", err);
    return 0;
}

static int budget_reached(const nj_trainer *t)
{
    if (t->cfg.max_steps > 0 && t->st.step >= t->cfg.max_steps) return 1;
    return t->cfg.minutes > 0 && now_elapsed(t) >= t->cfg.minutes * 60.0;
}

/* Budget or signal; with several ranks, agreed by all (trainer_dist.h). */
static int should_stop(nj_trainer *t)
{
    int agreed = nj_trainer_dist_stop(t, stop_signal ? 2 : budget_reached(t) ? 1 : 0);
    if (agreed == 2 && !stop_signal) stop_signal = SIGTERM;
    return agreed != 0;
}

static int checkpoint_due(const nj_trainer *t)
{
    if (t->cfg.checkpoint_steps > 0 && t->st.step - t->last_ckpt_step >= t->cfg.checkpoint_steps) return 1;
    return t->cfg.checkpoint_minutes > 0 && now_elapsed(t) - t->last_ckpt >= t->cfg.checkpoint_minutes * 60.0;
}

/* One optimiser step on a batch.  Returns 0 ok, 1 skipped, -1 fatal. */
static int train_one(nj_trainer *t, const nj_batch *b, nj_step_result *r, float *lr)
{
    nj_graph_reset(t->g);
    nj_params_zero_grad(&t->model.params);
    nj_train_config tmp;
    if (nj_step_replicas_run(t->split, t->g, &t->model, nj_step_config(&t->cfg, t->st.step, &tmp), b, &t->rng, r)) {
        nj_runlog_say(&t->log, "step %ld failed: %s", t->st.step, nj_graph_error(t->g));
        return -1;
    }
    inject_fault(t, r);
    if (nj_trainer_dist_average(t, r)) {
        nj_runlog_say(&t->log, "step %ld: averaging the gradients over the ranks failed", t->st.step);
        return -1;
    }
    double gn = nj_params_grad_norm(&t->model.params);
    if (!isfinite(r->loss) || !isfinite(gn)) return handle_bad_step(t, isfinite(r->loss) ? "gradient" : "loss") < 0 ? -1 : 1;
    t->bad_steps = 0;
    /* clipping is folded into the update (the grad buffers keep the unclipped values) */
    float clip = nj_clip_factor(gn, t->cfg.grad_clip);
    *lr = nj_train_config_lr(&t->cfg, t->st.step, t->st.schedule_steps) * t->st.lr_scale;
    t->opt.lr = *lr;
    nj_adam_step_scaled(&t->opt, &t->model.params, clip);
    t->st.step++;
    return 0;
}

int nj_trainer_run(nj_trainer *t)
{
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigaction(SIGINT, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);
    stop_signal = 0;
    parse_fault_hook(t);
    char err[1024];
    int epoch_len = t->ntrain, code = 0, logged = 0;
    double tlog = now_elapsed(t);
    long slog = t->st.step;
    const char *ended = "budget reached";
    while (!should_stop(t) && !nj_runlog_error(&t->log)) {
        const nj_batch *b = nj_loader_next(t->loader, err, sizeof err);
        if (!b) { nj_runlog_say(&t->log, "data: %s", err); code = 1; ended = "data error"; break; }
        nj_step_result r;
        float lr = 0;
        int s = train_one(t, b, &r, &lr);
        if (s < 0) { code = 1; ended = t->bad_steps ? "non-finite steps persist" : "error"; break; }
        if (s == 1) {
            if (t->bad_steps == 0 && nj_trainer_start_loader(t, err, sizeof err)) {
                nj_runlog_say(&t->log, "cannot restart the loader: %s", err);
                code = 1;
                break;
            }
            continue;
        }
        double el = now_elapsed(t);
        fix_schedule(t);
        if (t->st.step % (t->cfg.log_every > 0 ? t->cfg.log_every : 1) == 0 || !logged) {
            double ips = el > tlog ? (double)(t->st.step - slog) * t->cfg.batch * t->ranks / (el - tlog) : 0;
            check_health(t, &r);
            log_step(t, &r, lr, ips, epoch_len);
            progress(t, &r, lr, ips, epoch_len);
            tlog = el; slog = t->st.step; logged = 1;
        }
        if (t->cfg.validate_every > 0 && t->st.step % t->cfg.validate_every == 0 && validate(t)) { code = 1; break; }
        if (checkpoint_due(t)) {
            if (nj_trainer_save(t, NULL, err, sizeof err)) {
                nj_trainer_write_failed(t, err);
                code = 1; ended = "checkpoint write failed";
                break;
            }
            t->last_ckpt = now_elapsed(t);
            t->last_ckpt_step = t->st.step;
        }
    }
    if (stop_signal) ended = stop_signal == SIGINT ? "interrupted (SIGINT)" : "stopped (SIGTERM)";
    if (code == 0 && nj_runlog_error(&t->log)) {
        nj_trainer_write_failed(t, nj_runlog_error(&t->log));
        code = 1; ended = "log write failed";
    }
    if (code == 0) {
        if (t->nval > 0 && t->cfg.validate_every > 0) validate(t);
        if (nj_trainer_save(t, NULL, err, sizeof err) || nj_trainer_save(t, "final.ckpt", err, sizeof err)) {
            nj_trainer_write_failed(t, err);
            code = 1; ended = "final checkpoint write failed";
        }
    }
    char line[512];
    snprintf(line, sizeof line, "{\"type\":\"end\",\"step\":%ld,\"ended\":\"%s\",\"elapsed_s\":%.1f,"
             "\"resumes\":%d,\"nan_recoveries\":%d}", t->st.step, ended, now_elapsed(t),
             t->st.resumes, t->st.nan_recoveries);
    nj_runlog_json(&t->log, line);
    if (t->rank != 0 || !t->write_report) {
    } else if (nj_runlog_error(&t->log)) {
        nj_runlog_say(&t->log, "report not written: the run log is incomplete");
    } else if (t->write_report(t->dir, err, sizeof err)) {
        nj_runlog_say(&t->log, "report not written: %s", err);
    }
    else nj_runlog_say(&t->log, "report: %s/report.html", t->dir);
    nj_trainer_memory_log(t);
    char health[64];
    nj_runlog_say(&t->log, "training ended at step %ld: %s; health: %s", t->st.step, ended,
                  nj_health_summary(&t->health, health, sizeof health));
    if (code == 0) nj_runlog_say(&t->log, "model: %s/final.ckpt", t->dir);
    if (stop_signal && code == 0)
        nj_runlog_say(&t->log, "to continue this run: nightjar train --config <same config> --out %s --resume", t->dir);
    return code;
}
