/* train/report/report_log.c — reading RUN_DIR/log.jsonl for the report: step,
 * validation and end records into arrays, health / non-finite records
 * counted, unparseable lines (a torn tail) counted and skipped. */
#include "train/report/report_parts.h"
#include <cjson/cJSON.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

static double num(const cJSON *o, const char *key)
{
    const cJSON *v = cJSON_GetObjectItemCaseSensitive(o, key);
    return cJSON_IsNumber(v) ? v->valuedouble : NAN;
}

static int grow(void **p, int n, int *cap, size_t size)
{
    if (n < *cap) return 0;
    int nc = *cap ? *cap * 2 : 256;
    void *q = realloc(*p, (size_t)nc * size);
    if (!q) return -1;
    *p = q;
    *cap = nc;
    return 0;
}

static void read_end(const cJSON *o, nj_run_log *log)
{
    const cJSON *e = cJSON_GetObjectItemCaseSensitive(o, "ended");
    log->has_end = 1;
    log->end_step = (long)num(o, "step");
    snprintf(log->ended, sizeof log->ended, "%s", cJSON_IsString(e) ? e->valuestring : "unknown");
    log->end_elapsed = num(o, "elapsed_s");
    double r = num(o, "resumes"), n = num(o, "nan_recoveries");
    log->resumes = isfinite(r) ? (int)r : 0;
    log->nan_recoveries = isfinite(n) ? (int)n : 0;
}

/* Adds one record; returns -1 only when out of memory. */
static int add_record(const cJSON *o, nj_run_log *log, int *scap, int *vcap)
{
    const cJSON *t = cJSON_GetObjectItemCaseSensitive(o, "type");
    const char *type = cJSON_IsString(t) ? t->valuestring : "";
    if (!strcmp(type, "step")) {
        if (grow((void **)&log->steps, log->nsteps, scap, sizeof *log->steps)) return -1;
        nj_log_step *s = &log->steps[log->nsteps++];
        s->step = (long)num(o, "step");
        s->loss = num(o, "loss");
        s->photometric = num(o, "photometric");
        s->smoothness = num(o, "smoothness");
        s->lr = num(o, "lr");
        s->images_per_s = num(o, "images_per_s");
        s->elapsed_s = num(o, "elapsed_s");
        s->mask_kept = num(o, "mask_kept");
        s->inverted = num(o, "inverted");
        s->gap = num(o, "gap");
    } else if (!strcmp(type, "val")) {
        if (grow((void **)&log->vals, log->nvals, vcap, sizeof *log->vals)) return -1;
        nj_log_val *v = &log->vals[log->nvals++];
        v->step = (long)num(o, "step");
        v->photometric = num(o, "photometric");
        v->elapsed_s = num(o, "elapsed_s");
        v->absrel = num(o, "absrel");
        v->delta1 = num(o, "delta_1_25");
    } else if (!strcmp(type, "health")) {
        log->health++;
    } else if (!strcmp(type, "nonfinite")) {
        log->nonfinite++;
    } else if (!strcmp(type, "end")) {
        read_end(o, log);
    }
    return 0;
}

int nj_run_log_read(const char *path, nj_run_log *log, char *err, size_t errlen)
{
    memset(log, 0, sizeof *log);
    FILE *f = fopen(path, "r");
    if (!f) return 0;
    char *line = NULL;
    size_t cap = 0;
    int scap = 0, vcap = 0, rc = 0;
    while (getline(&line, &cap, f) != -1) {
        cJSON *o = cJSON_Parse(line);
        if (!cJSON_IsObject(o)) {
            log->bad_lines++;
        } else if (add_record(o, log, &scap, &vcap)) {
            snprintf(err, errlen, "%s: out of memory reading the log", path);
            rc = -1;
        }
        cJSON_Delete(o);
        if (rc) break;
    }
    free(line);
    fclose(f);
    if (rc) nj_run_log_free(log);
    return rc;
}

void nj_run_log_free(nj_run_log *log)
{
    free(log->steps);
    free(log->vals);
    log->steps = NULL;
    log->vals = NULL;
    log->nsteps = log->nvals = 0;
}
