/* data/dataset.h — the dataset description (JSON) and its validation.
 *
 * The JSON contract (keys kept exactly; relative paths resolve against the
 * JSON file's folder):
 *   { "sequences": [ { "name": "yard-03",
 *       "images": "yard-03/cam0",            folder of PNG/JPEG frames, ordered by file name
 *       "camera": {"fx":..,"fy":..,"cx":..,"cy":..,   pixels, at the on-disk image size
 *                  "lens": {"model": "radial-tangential", "k1":..,"k2":..,"p1":..,"p2":..,"k3":..}
 *                       or {"model": "fisheye", "k1":..,"k2":..,"k3":..,"k4":..}},
 *                                            optional lens distortion (Brown 1966 / Kannala &
 *                                            Brandt 2006; absent coefficients are 0): frames are
 *                                            undistorted at load time to a pinhole view
 *       "right_images": "yard-03/cam1",      optional stereo partner (same file names)
 *       "baseline": 0.12,                    metres, required with right_images of a rectified pair
 *       "right_camera": {"fx":..,"fy":..,"cx":..,"cy":.., "lens": {..},
 *                        "rotation": [3 or 9 numbers], "position": [x, y, z]},
 *                                            instead of "baseline": a raw (unrectified) rig —
 *                                            the right camera's intrinsics, lens, orientation
 *                                            (rotation vector in radians, or a row-major 3x3
 *                                            matrix, taking right-camera directions into the
 *                                            left camera's frame) and optical centre in the
 *                                            left camera's frame (metres); both cameras are
 *                                            rectified at load time and the baseline is |position|
 *       "depth": {"dir": "...", "format": "png16"|"npy"|"pfm", "scale": 1000.0},
 *                                            optional ground truth (scale: png16 only, required there)
 *       "poses": "yard-03/poses.txt",        optional ground truth, 12 numbers per line
 *       "lead_mask": "yard-03/lead",         optional folder of 8-bit PNG masks, one per frame
 *                                            (same stem as the frame): nonzero = a vehicle
 *                                            driven ahead at the camera's speed (eval scores it)
 *       "split": "train" } ] }               train | val | test, default train
 *
 * nj_dataset_open parses and validates everything `nightjar check-data`
 * reports; training calls the same function and refuses data with problems.
 */
#ifndef NJ_DATASET_H
#define NJ_DATASET_H
#include "data/depthio.h"
#include "data/problems.h"
#include "data/undistort.h"
#include "nn/geom/camera.h"

typedef enum { NJ_SPLIT_TRAIN = 0, NJ_SPLIT_VAL = 1, NJ_SPLIT_TEST = 2 } nj_split;

typedef struct nj_sequence {
    /* from the JSON (paths resolved) */
    char *name;
    char *images;            /* folder of frames */
    nj_camera camera;        /* at the on-disk size; with a lens or a raw rig, the pinhole
                                view the frames are resampled to (set by validation) */
    char *camera_text;       /* the "camera" object as compact JSON text (NULL when absent
                                or not an object): the frame store's key (framestore.h) */
    char *right_images;      /* NULL without stereo */
    float baseline;          /* metres */
    nj_camera raw_camera;    /* "camera" as calibrated (= camera without a lens or rig) */
    nj_lens lens;            /* its lens; kind NJ_LENS_NONE: frames used as they are */
    int rig;                 /* 1: "right_camera" given, the pair is rectified at load time */
    nj_camera right_camera;  /* the rig's right camera as calibrated */
    nj_lens right_lens;
    double right_rot[9];     /* right-camera directions → left camera frame */
    double right_pos[3];     /* right optical centre in the left camera frame, metres */
    nj_undistort *undistort; /* [0] left, [1] right (rig only); NULL: frames used as they are.
                                Built by validation; undistort[k].key identifies the resampling
                                (a cache of prepared frames must include it) */
    char *depth_dir;         /* NULL without depth */
    nj_depth_format depth_format;
    float depth_scale;
    char *poses;             /* NULL without poses */
    char *lead_mask_dir;     /* NULL without "lead_mask" */
    nj_split split;
    /* from validation */
    int nframes;
    char **frames;           /* file names in images/, sorted */
    int width, height;       /* of the first frame */
    int nkept;               /* frames left after skipping near-duplicates */
    int *kept;               /* their indices into frames[] */
    int duplicates;          /* frames skipped as near-duplicates */
    int problems;            /* problems found in this sequence */
    int decoded;             /* images decoded by the validation (frames and partners) */
    int scan_cached;         /* 1: the scan's result came from the scan cache */
} nj_sequence;

typedef struct nj_dataset {
    char *path;              /* the JSON file */
    char *root;              /* its folder */
    int nseq;
    nj_sequence *seq;
} nj_dataset;

/* Temporal offsets a training sample may use (data.frame_offsets). */
#define NJ_MAX_OFFSETS 4

typedef struct nj_data_options {
    int offsets[NJ_MAX_OFFSETS]; /* temporal sources t−k and t+k for each k listed (k ≥ 1) */
    int noffsets;            /* how many are listed; 0 = no temporal sources */
    int stereo;              /* add the stereo partner when the sequence has one */
    float dup_threshold;     /* skip frames that barely differ from the last kept frame:
                                their change (grey levels 0..1: the 90th percentile of
                                the absolute difference of 32-pixel-wide grey thumbnails,
                                gain difference divided out, the frames' estimated noise
                                removed; data/validate.c) is below this; 0 disables */
    int headers_only;        /* 1: read only each image's header (format, size; nothing is
                                decoded): pixel data is not checked and no frame is skipped
                                as a near-duplicate (every frame of the right size is kept) */
    const char *scan_cache;  /* folder of the scan cache (data/scancache.h); NULL = none */
    int scan_cache_read;     /* 1: take a matching entry instead of decoding; 0: only write */
} nj_data_options;

/* offsets {1}, stereo on, dup_threshold = 0.003, full decode, no scan cache. */
void nj_data_options_default(nj_data_options *o);

/* Parses the JSON into *ds (no file system checks).  Returns the number of
 * problems added to *pr (0 = the description is well-formed). */
int nj_dataset_parse(const char *path, nj_dataset *ds, nj_problems *pr);
/* Parses and validates folders, frames (every image is decoded, unless
 * headers_only or a scan cache entry matches), sizes,
 * stereo partners, ground truth and sample counts.  Returns the number of
 * problems (0 = training can use the data). */
int nj_dataset_open(const char *path, const nj_data_options *o, nj_dataset *ds, nj_problems *pr);
void nj_dataset_free(nj_dataset *ds);

/* Validation of one parsed sequence (folders, frames, images, partners,
 * ground truth, duplicates).  Returns the problems added. */
int nj_sequence_validate(nj_sequence *s, const nj_data_options *o, nj_problems *pr);
/* The resampling of the sequence's left (right = 0) or right (1) frames, or
 * NULL when they are used as they are. */
const nj_undistort *nj_sequence_undistort(const nj_sequence *s, int right);
/* Builds s->undistort from the parsed lens / rig for frames of s->width ×
 * s->height, sets s->camera to the view's pinhole and, for a rig, s->baseline.
 * Returns the problems added (one line naming the sequence and the reason). */
int nj_sequence_lens_setup(nj_sequence *s, nj_problems *pr);
/* check-data's lines on a sequence with a lens or rig: the calibration and
 * the pinhole intrinsics its frames are resampled to (nothing otherwise). */
void nj_sequence_lens_describe(const nj_sequence *s, FILE *f);

/* Frame listing: PNG/JPEG file names in `dir` sorted by name (malloc'd).
 * Returns the count, or -1 if the folder cannot be read. */
int nj_list_frames(const char *dir, char ***names);
void nj_free_names(char **names, int n);

/* "DIR/NAME" (malloc'd). */
char *nj_path_join(const char *dir, const char *name);
/* Depth file of a frame: DEPTH_DIR/<frame stem><extension of the format>. */
char *nj_depth_path(const nj_sequence *s, int frame);
/* Lead-vehicle mask of a frame: LEAD_MASK_DIR/<frame stem>.png (malloc'd; NULL
 * when the sequence has no "lead_mask" or out of memory).  An 8-bit PNG read
 * with nj_image_load: nonzero = a pixel of the vehicle driven ahead. */
char *nj_lead_mask_path(const nj_sequence *s, int frame);

/* One training sample: target frame, its temporal sources, the stereo flag. */
typedef struct nj_sample {
    int seq;                 /* index into ds->seq */
    int target;              /* frame index into seq->frames */
    int src[2 * NJ_MAX_OFFSETS]; /* frame indices: src[2i] = t−k_i, src[2i+1] = t+k_i for
                                the i-th offset k_i of the options */
    int nsrc;                /* 2 × the number of offsets, or 0 */
    int stereo;              /* 1: the stereo partner of the target is used */
} nj_sample;

/* The largest temporal offset of the options (0 = none). */
int nj_data_max_offset(const nj_data_options *o);
/* Number of samples a sequence yields under the options. */
int nj_sequence_samples(const nj_sequence *s, const nj_data_options *o, nj_sample *out, int seq);
/* All samples of the sequences in `split` (malloc'd into *out).  Returns the
 * count, or -1 when out of memory. */
int nj_dataset_samples(const nj_dataset *ds, nj_split split, const nj_data_options *o, nj_sample **out);

const char *nj_split_name(nj_split s);

/* The per-sequence report and the problems, as `nightjar check-data` prints. */
void nj_dataset_report(const nj_dataset *ds, const nj_data_options *o, const nj_problems *pr, FILE *f);

#endif
