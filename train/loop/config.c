/* train/loop/config.c — training configuration: defaults, the key table, range and
 * cross-field validation, and the learning-rate schedule.  Reading and
 * writing JSON is in config_json.c. */
#include "train/loop/config_fields.h"
#include "data/augment.h"
#include <ctype.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <string.h>

#define F(sec, key, kind, member, lo, hi, lo_open, hi_open) \
    {sec, key, kind, offsetof(nj_train_config, member), lo, hi, lo_open, hi_open}
#define TEXT(sec, key, kind, member) F(sec, key, kind, member, 0, 0, 0, 0)

const nj_config_field nj_config_fields[] = {
    TEXT("run", "name", NJ_F_NAME, name),
    F("run", "seed", NJ_F_UINT, seed, 0, 4294967295.0, 0, 0),
    F("run", "threads", NJ_F_INT, threads, 0, 256, 0, 0),
    F("run", "minutes", NJ_F_DOUBLE, minutes, 0, 1e6, 0, 0),
    F("run", "hours", NJ_F_HOURS, minutes, 0, 1e4, 0, 0),
    F("run", "max_steps", NJ_F_LONG, max_steps, 0, 1e12, 0, 0),
    F("run", "log_every", NJ_F_INT, log_every, 1, 1e6, 0, 0),
    F("run", "validate_every", NJ_F_INT, validate_every, 0, 1e9, 0, 0),
    F("run", "checkpoint_minutes", NJ_F_DOUBLE, checkpoint_minutes, 0, 1e6, 1, 0),
    F("run", "checkpoint_steps", NJ_F_LONG, checkpoint_steps, 0, 1e12, 0, 0),
    F("run", "keep_last", NJ_F_INT, keep_last, 1, 1000, 0, 0),
    TEXT("data", "dataset", NJ_F_PATH, dataset),
    F("data", "width", NJ_F_INT, width, 8, 8192, 0, 0),
    F("data", "height", NJ_F_INT, height, 8, 8192, 0, 0),
    F("data", "batch", NJ_F_INT, batch, 1, 1024, 0, 0),
    F("data", "frame_offsets", NJ_F_OFFSETS, offsets, 1, 100, 0, 0),
    TEXT("data", "video", NJ_F_BOOL, video),
    TEXT("data", "stereo", NJ_F_BOOL, stereo),
    F("data", "duplicate_threshold", NJ_F_FLOAT, duplicate_threshold, 0, 1, 0, 1),
    F("data", "loader_workers", NJ_F_INT, loader_workers, 0, 64, 0, 0),
    TEXT("data", "frame_store", NJ_F_BOOL, frame_store),
    TEXT("data", "frame_store_dir", NJ_F_PATH, frame_store_dir),
    F("data.augment", "brightness", NJ_F_FLOAT, brightness, 0, 1, 0, 1),
    F("data.augment", "contrast", NJ_F_FLOAT, contrast, 0, 1, 0, 1),
    F("data.augment", "saturation", NJ_F_FLOAT, saturation, 0, 1, 0, 1),
    F("data.augment", "hue", NJ_F_FLOAT, hue, 0, 0.5, 0, 0),
    F("data.augment", "flip", NJ_F_FLOAT, flip, 0, 1, 0, 0),
    F("data.augment", "turn_deg", NJ_F_FLOAT, turn_deg, 0, NJ_TURN_MAX_DEG, 0, 0),
    F("data.augment", "roll_deg", NJ_F_FLOAT, roll_deg, 0, NJ_TURN_MAX_DEG, 0, 0),
    F("model", "stages", NJ_F_INT, model.stages, 1, NJ_MAX_STAGES, 0, 0),
    F("model", "width", NJ_F_FLOAT, model.width, 0, 8, 1, 0),
    F("model", "scales", NJ_F_INT, model.scales, 1, NJ_MAX_SCALES, 0, 0),
    TEXT("model", "norm", NJ_F_NORM, model.norm),
    F("model", "head_init", NJ_F_FLOAT, model.head_init, 0, 1, 1, 1),
    TEXT("model", "pose", NJ_F_BOOL, model.pose),
    F("model", "pose_stages", NJ_F_INT, model.pose_stages, 1, NJ_MAX_STAGES, 0, 0),
    F("model", "pose_width", NJ_F_FLOAT, model.pose_width, 0, 8, 1, 0),
    F("model", "pose_scale", NJ_F_FLOAT, model.pose_scale, 0, 10, 1, 0),
    F("model", "rotation_scale", NJ_F_FLOAT, model.rotation_scale, 0, 10, 0, 0),
    TEXT("model", "pose_norm", NJ_F_BOOL, model.pose_norm),
    TEXT("model", "pose_rays", NJ_F_BOOL, model.pose_rays),
    F("model", "bn_momentum", NJ_F_FLOAT, model.bn_momentum, 0, 1, 1, 0),
    F("model", "depth_range", NJ_F_RANGE, model.depth_range, 0, 1e6, 1, 0),
    F("loss", "ssim_weight", NJ_F_FLOAT, loss.alpha, 0, 1, 0, 0),
    F("loss", "smoothness", NJ_F_FLOAT, loss.smooth_weight, 0, 10, 0, 0),
    TEXT("loss", "automask", NJ_F_BOOL, loss.automask),
    F("loss", "automask_from_step", NJ_F_LONG, automask_from, 0, 1e12, 0, 0),
    F("loss", "tie_break", NJ_F_FLOAT, loss.tie_break, 0, 1, 0, 0),
    TEXT("loss", "gain_match", NJ_F_BOOL, loss.gain_match),
    TEXT("loss", "automask_widest", NJ_F_BOOL, loss.automask_widest),
    TEXT("loss", "each_offset", NJ_F_BOOL, loss.each_offset),
    F("loss", "arc_motion", NJ_F_FLOAT, loss.arc_motion, 0, 100, 0, 0),
    F("loss", "arc_motion_from_step", NJ_F_LONG, arc_motion_from, 0, 1e12, 0, 0),
    F("loss", "rotation_pairs", NJ_F_FLOAT, rotation_pairs, 0, 100, 0, 0),
    F("loss", "rotation_pairs_deg", NJ_F_FLOAT, rotation_pairs_deg, 0, NJ_TURN_MAX_DEG, 0, 0),
    F("loss", "rotation_pairs_until_step", NJ_F_LONG, rotation_pairs_until, 0, 1e12, 0, 0),
    F("loss", "free_space", NJ_F_FLOAT, free_space, 0, 100, 0, 0),
    F("loss", "free_space_margin", NJ_F_FLOAT, free_space_margin, 0, 10, 0, 0),
    F("loss", "free_space_reach", NJ_F_FLOAT, free_space_reach, 1, 1000, 0, 0),
    F("loss", "free_space_from_step", NJ_F_LONG, free_space_from, 0, 1e12, 0, 0),
    F("loss", "saturation_guard", NJ_F_FLOAT, loss.saturation_guard, 0, 100, 0, 0),
    F("optim", "lr", NJ_F_FLOAT, lr, 0, 1, 1, 0),
    F("optim", "lr_min", NJ_F_FLOAT, lr_min, 0, 1, 0, 0),
    F("optim", "warmup_steps", NJ_F_INT, warmup_steps, 0, 1e9, 0, 0),
    TEXT("optim", "schedule", NJ_F_SCHEDULE, cosine),
    F("optim", "step_every", NJ_F_INT, step_every, 1, 1e9, 0, 0),
    F("optim", "step_gamma", NJ_F_FLOAT, step_gamma, 0, 1, 1, 0),
    F("optim", "weight_decay", NJ_F_FLOAT, weight_decay, 0, 1, 0, 0),
    F("optim", "grad_clip", NJ_F_FLOAT, grad_clip, 0, 1e6, 0, 0),
    TEXT("optim", "init", NJ_F_PATH, init),
    TEXT("optim", "freeze_encoder", NJ_F_BOOL, freeze_encoder),
};
const int nj_config_nfields = (int)(sizeof nj_config_fields / sizeof nj_config_fields[0]);

const char *const nj_config_sections[] = {"run", "data", "data.augment", "model", "loss", "optim"};
const int nj_config_nsections = (int)(sizeof nj_config_sections / sizeof nj_config_sections[0]);

void nj_train_config_data_options(const nj_train_config *c, nj_data_options *o)
{
    nj_data_options_default(o);
    o->noffsets = c->video ? c->noffsets : 0;
    for (int i = 0; i < o->noffsets; i++) o->offsets[i] = c->offsets[i];
    o->stereo = c->stereo;
    o->dup_threshold = c->duplicate_threshold;
}

void nj_train_config_default(nj_train_config *c)
{
    memset(c, 0, sizeof *c);
    snprintf(c->name, sizeof c->name, "run");
    c->seed = 1;
    c->minutes = 5;
    c->log_every = 10;
    c->validate_every = 200;
    c->checkpoint_minutes = 10;
    c->keep_last = 3;
    c->width = 320;
    c->height = 96;
    c->batch = 4;
    c->offsets[0] = 1;
    c->noffsets = 1;
    c->video = 1;
    c->brightness = c->contrast = c->saturation = 0.2f;
    c->hue = 0.05f;
    c->flip = 0.5f;
    c->rotation_pairs_deg = 1.0f;
    c->free_space_margin = 0.1f;
    c->free_space_reach = 8.0f;
    nj_model_config_default(&c->model);
    c->model.seed = c->seed;
    nj_vs_config_default(&c->loss);
    c->lr = 1e-4f;
    c->lr_min = 1e-6f;
    c->warmup_steps = 100;
    c->cosine = 1;
    c->step_every = 1000;
    c->step_gamma = 0.5f;
    c->grad_clip = 1.0f;
}

int nj_config_range_ok(const nj_config_field *f, double v, char *msg, size_t n)
{
    int low = f->lo_open ? v > f->lo : v >= f->lo;
    int high = f->hi_open ? v < f->hi : v <= f->hi;
    if (low && high) return 1;
    char got[40];
    snprintf(got, sizeof got, "%.*g", f->kind == NJ_F_FLOAT ? 7 : 15, v);   /* floats: their own precision */
    if (!f->lo_open && !f->hi_open)
        snprintf(msg, n, "%s.%s must be between %.15g and %.15g (got %s)", f->section, f->key, f->lo, f->hi, got);
    else
        snprintf(msg, n, "%s.%s must be %s %.15g and %s %.15g (got %s)", f->section, f->key,
                 f->lo_open ? "more than" : "at least", f->lo, f->hi_open ? "less than" : "at most", f->hi, got);
    return 0;
}

int nj_config_range_ends_ok(const nj_config_field *f, const double ends[2], char *msg, size_t n)
{
    for (int i = 0; i < 2; i++) {
        char key[48];
        snprintf(key, sizeof key, "%s[%d]", f->key, i);
        nj_config_field e = *f;   /* the message names the element */
        e.key = key;
        e.kind = NJ_F_FLOAT;
        if (!nj_config_range_ok(&e, ends[i], msg, n)) return 0;
    }
    return 1;
}

int nj_config_name_ok(const char *name, char *msg, size_t n)
{
    size_t len = strlen(name);
    int ok = len > 0 && len < 64 && name[0] != '.';
    for (size_t i = 0; ok && i < len; i++)
        ok = isalnum((unsigned char)name[i]) || name[i] == '.' || name[i] == '_' || name[i] == '-';
    if (!ok)
        snprintf(msg, n,
                 "run.name must be 1 to 63 letters, digits, '.', '_' or '-', not starting with '.' (got \"%.63s\")",
                 name);
    return ok;
}

/* The numeric value of a field in *c (NAN for non-numeric kinds). */
static double field_number(const nj_train_config *c, const nj_config_field *f)
{
    const char *p = (const char *)c + f->off;
    switch (f->kind) {
    case NJ_F_INT: return *(const int *)p;
    case NJ_F_LONG: return (double)*(const long *)p;
    case NJ_F_UINT: return *(const unsigned *)p;
    case NJ_F_FLOAT: return *(const float *)p;
    case NJ_F_DOUBLE: return *(const double *)p;
    default: return NAN;
    }
}

static int check_offsets(const nj_train_config *c, const nj_config_field *f, char *err, size_t errlen)
{
    if (c->noffsets < 0 || c->noffsets > NJ_MAX_OFFSETS) {
        snprintf(err, errlen, "data.frame_offsets may hold at most %d offsets (got %d)", NJ_MAX_OFFSETS, c->noffsets);
        return -1;
    }
    for (int i = 0; i < c->noffsets; i++) {
        char msg[256];
        if (!nj_config_range_ok(f, c->offsets[i], msg, sizeof msg)) {
            snprintf(err, errlen, "data.frame_offsets[%d] must be a whole number between %.0f and %.0f (got %d)", i,
                     f->lo, f->hi, c->offsets[i]);
            return -1;
        }
        for (int j = 0; j < i; j++)
            if (c->offsets[j] == c->offsets[i]) {
                snprintf(err, errlen, "data.frame_offsets lists %d twice", c->offsets[i]);
                return -1;
            }
    }
    return 0;
}

static int range_ends_ok(const nj_train_config *c, const nj_config_field *f, char *err, size_t errlen)
{
    const nj_depth_range *r = (const nj_depth_range *)((const char *)c + f->off);
    const double ends[2] = {r->near, r->far};
    return nj_config_range_ends_ok(f, ends, err, errlen);
}

/* Every field inside its range (the table's bounds). */
static int check_fields(const nj_train_config *c, char *err, size_t errlen)
{
    for (int i = 0; i < nj_config_nfields; i++) {
        const nj_config_field *f = &nj_config_fields[i];
        double v = field_number(c, f);
        if (!isnan(v) || f->kind == NJ_F_FLOAT || f->kind == NJ_F_DOUBLE) {
            if (!nj_config_range_ok(f, v, err, errlen)) return -1;
        } else if (f->kind == NJ_F_NAME && !nj_config_name_ok(c->name, err, errlen)) {
            return -1;
        } else if (f->kind == NJ_F_OFFSETS && check_offsets(c, f, err, errlen)) {
            return -1;
        } else if (f->kind == NJ_F_RANGE && !range_ends_ok(c, f, err, errlen)) {
            return -1;
        } else if (f->kind == NJ_F_NORM && (c->model.norm < NJ_NORM_NONE || c->model.norm > NJ_NORM_GROUP)) {
            snprintf(err, errlen, "model.norm must be \"batch\", \"group\" or \"none\"");
            return -1;
        }
    }
    return 0;
}

static int check_data(const nj_train_config *c, char *err, size_t errlen)
{
    int sources = (c->video ? 2 * c->noffsets : 0) + (c->stereo ? 1 : 0);
    if (!c->video && !c->stereo)
        snprintf(err, errlen, "data.video and data.stereo are both false: there is nothing to learn from");
    else if (c->video && c->noffsets == 0)
        snprintf(err, errlen, "data.video needs at least one entry in data.frame_offsets");
    else if (sources > NJ_MAX_SOURCES)
        snprintf(err, errlen, "data: %d frame offsets%s give %d source views per target, at most %d are supported",
                 c->noffsets, c->stereo ? " plus stereo" : "", sources, NJ_MAX_SOURCES);
    else if (c->video && !c->model.pose)
        snprintf(err, errlen, "data.video needs the pose net: set model.pose to true");
    else
        return 0;
    return -1;
}

static int check_model(const nj_train_config *c, char *err, size_t errlen)
{
    int d = 1 << c->model.stages;
    if (c->model.scales > c->model.stages)
        snprintf(err, errlen, "model.scales (%d) cannot exceed model.stages (%d)", c->model.scales, c->model.stages);
    else if (c->width % d != 0)
        snprintf(err, errlen, "data.width %d must be divisible by %d (2^model.stages)", c->width, d);
    else if (c->height % d != 0)
        snprintf(err, errlen, "data.height %d must be divisible by %d (2^model.stages)", c->height, d);
    else
        return 0;
    return -1;
}

static int check_rest(const nj_train_config *c, char *err, size_t errlen)
{
    if (!(c->model.depth_range.near < c->model.depth_range.far))
        snprintf(err, errlen, "model.depth_range: near (%g) must be less than far (%g)", c->model.depth_range.near,
                 c->model.depth_range.far);
    else if (c->lr_min > c->lr)
        snprintf(err, errlen, "optim.lr_min (%g) must not exceed optim.lr (%g)", c->lr_min, c->lr);
    else if (c->minutes <= 0 && c->max_steps <= 0)
        snprintf(err, errlen, "run: no budget: set run.minutes, run.hours or run.max_steps");
    else if (c->loss.arc_motion > 0 && (c->turn_deg > 0 || c->roll_deg > 0))
        /* the penalty would read the pose net's motion, which includes the input's turn */
        snprintf(err, errlen, "loss.arc_motion cannot be combined with data.augment.turn_deg or roll_deg");
    else if (c->rotation_pairs > 0 && !(c->video && c->model.pose))
        snprintf(err, errlen, "loss.rotation_pairs needs video training with a pose net (data.video, model.pose)");
    else if (c->loss.each_offset && c->loss.automask_widest)
        /* each offset is masked against its own un-warped sources */
        snprintf(err, errlen, "loss.each_offset replaces loss.automask_widest: set automask_widest false");
    else
        return 0;
    return -1;
}

int nj_train_config_check(const nj_train_config *c, char *err, size_t errlen)
{
    if (check_fields(c, err, errlen) || check_data(c, err, errlen) || check_model(c, err, errlen) ||
        check_rest(c, err, errlen))
        return -1;
    return 0;
}

int nj_train_config_frame_step(const nj_train_config *c)
{
    int k = 0;
    for (int i = 0; i < c->noffsets && i < NJ_MAX_OFFSETS; i++)
        if (c->offsets[i] > 0 && (!k || c->offsets[i] < k)) k = c->offsets[i];
    return k ? k : 1;
}

/* Warm-up: lr·step/warmup_steps for step < warmup_steps (linear from 0).
 * Then, with the cosine schedule and a known total, cosine annealing
 * (Loshchilov & Hutter 2017) over the remaining steps:
 *   lr_min + (lr − lr_min)·(1 + cos(π·t))/2,  t = (step − warmup)/(total − warmup) clipped to [0, 1];
 * otherwise (step schedule, or total unknown) lr·gamma^⌊(step − warmup)/step_every⌋,
 * never below lr_min. */
float nj_train_config_lr(const nj_train_config *c, long step, long total_steps)
{
    if (step < 0) step = 0;
    if (step < c->warmup_steps) return (float)((double)c->lr * (double)step / c->warmup_steps);
    long after = step - c->warmup_steps;
    if (c->cosine && total_steps > c->warmup_steps) {
        double t = (double)after / (double)(total_steps - c->warmup_steps);
        if (t > 1) t = 1;
        return (float)(c->lr_min + (c->lr - c->lr_min) * 0.5 * (1.0 + cos(M_PI * t)));
    }
    long every = c->step_every > 0 ? c->step_every : 1;
    double lr = c->lr * pow(c->step_gamma, (double)(after / every));
    return (float)(lr < c->lr_min ? c->lr_min : lr);
}
