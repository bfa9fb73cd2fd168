/* train/loop/config_fields.h — the table behind train/loop/config.h: one row per JSON
 * key (section, name, kind, place in nj_train_config, allowed range).  The
 * loader, the JSON writer and the range checks all walk this one table, so a
 * key cannot be readable but not written, or written but not checked.
 * Internal to train/config*.c. */
#ifndef NJ_CONFIG_FIELDS_H
#define NJ_CONFIG_FIELDS_H
#include "train/loop/config.h"

typedef enum {
    NJ_F_INT, NJ_F_LONG, NJ_F_UINT,    /* whole numbers */
    NJ_F_FLOAT, NJ_F_DOUBLE,
    NJ_F_BOOL,                         /* int 0/1 ↔ false/true */
    NJ_F_NAME,                         /* char[64]: letters, digits, '.', '_', '-' */
    NJ_F_PATH,                         /* char[NJ_PATH_MAX], resolved against the file's folder */
    NJ_F_NORM,                         /* nj_norm_kind ↔ "batch" | "group" | "none" */
    NJ_F_SCHEDULE,                     /* cosine flag ↔ "cosine" | "step" */
    NJ_F_OFFSETS,                      /* offsets[] + noffsets ↔ array of whole numbers */
    NJ_F_RANGE,                        /* nj_depth_range ↔ [near, far]; lo/hi bound each */
    NJ_F_HOURS                         /* read only: sets minutes = 60 × hours */
} nj_field_kind;

typedef struct nj_config_field {
    const char *section;     /* "run", "data", "data.augment", "model", "loss", "optim" */
    const char *key;
    nj_field_kind kind;
    size_t off;              /* offset of the member in nj_train_config */
    double lo, hi;           /* allowed range of numbers (of each element for offsets) */
    int lo_open, hi_open;    /* 1: the bound itself is excluded */
} nj_config_field;

extern const nj_config_field nj_config_fields[];
extern const int nj_config_nfields;
/* Sections in file order; "data.augment" is an object inside "data". */
extern const char *const nj_config_sections[];
extern const int nj_config_nsections;

/* 1 when v lies in the field's range; otherwise 0 and `msg` gets
 * "SECTION.KEY must be between A and B (got V)". */
int nj_config_range_ok(const nj_config_field *f, double v, char *msg, size_t n);
/* Each end of a NJ_F_RANGE field inside the field's bounds; 0 with
 * "SECTION.KEY[i] must be ... (got V)" in `msg` otherwise. */
int nj_config_range_ends_ok(const nj_config_field *f, const double ends[2], char *msg, size_t n);
/* Validity of a run name; 0 with a message when unusable. */
int nj_config_name_ok(const char *name, char *msg, size_t n);

#endif
