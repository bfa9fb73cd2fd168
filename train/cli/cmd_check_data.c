/* train/cli/cmd_check_data.c — `nightjar check-data DATASET.json`: validates a
 * dataset (data/dataset.h) and reports per sequence; exit status 0 only when
 * training can use it. */
#include "train/cli/commands.h"
#include "train/cli/options.h"
#include "data/dataset.h"
#include "data/scancache.h"

static const char ABOUT[] =
    "  Checks a dataset description and its files: folders, frames (every image is\n"
    "  decoded), sizes, stereo partners, ground truth; reports per sequence the frame\n"
    "  count, resolution, usable samples and near-duplicate frames skipped.  A clean\n"
    "  sequence's result goes to the scan cache ($XDG_CACHE_HOME or ~/.cache, under\n"
    "  nightjar/scan), so that `train` need not decode its frames again while they\n"
    "  are unchanged.\n";

static const char EPILOGUE[] =
    "  --quick reads only each image file's header (PNG IHDR, JPEG SOF: format and\n"
    "  size) and finds the same missing, unreadable, foreign-format, wrongly sized\n"
    "  and inconsistent frames and partners as the full check, in a fraction of the\n"
    "  time (100,000 frames: seconds instead of minutes).  It does NOT check: pixel\n"
    "  data (a corrupt compressed body passes; a PNG cut short is still found from\n"
    "  its chunk lengths, a JPEG cut short after its header is not), and\n"
    "  near-duplicate frames (none are skipped: sample counts are upper bounds).\n";

int nj_check_data_main(int argc, char **argv)
{
    nj_data_options o;
    nj_data_options_default(&o);
    const char *path = NULL;
    int no_stereo = 0, quick = 0, k = 1;
    nj_opt opts[] = {
        {.kind = NJ_OPT_ARG, .meta = "DATASET.json", .help = "the dataset description", .required = 1, .str = &path},
        {.name = "--k", .kind = NJ_OPT_INT, .meta = "N", .lo = 0, .hi = 100,
         .help = "temporal sources t-N and t+N (0 = stereo only)", .i = &k},
        {.name = "--no-stereo", .kind = NJ_OPT_FLAG, .help = "ignore stereo partners when counting samples",
         .flag = &no_stereo},
        {.name = "--dup-threshold", .kind = NJ_OPT_FLOAT, .meta = "X", .lo = 0, .hi = 1,
         .help = "change below which a frame counts as a duplicate of the last\n"
                 "kept one (0 = off): the 90th percentile of the grey difference\n"
                 "of 32-pixel-wide thumbnails, after dividing out the gain change\n"
                 "and removing the frames' estimated sensor noise",
         .f = &o.dup_threshold},
        {.name = "--quick", .kind = NJ_OPT_FLAG,
         .help = "headers only: no pixel decoding, no near-duplicate check (below)", .flag = &quick},
    };
    nj_opt_spec spec = {.command = "check-data", .about = ABOUT, .epilogue = EPILOGUE, .opts = opts,
                        .nopts = NJ_OPT_COUNT(opts), .exit_status = "0 usable, 1 problems found, 2 bad usage"};
    int rc = nj_opt_main(&spec, argc, argv);
    if (rc != NJ_OPT_OK) return nj_opt_status(rc);
    if (no_stereo) o.stereo = 0;
    o.offsets[0] = k;
    o.noffsets = k > 0;
    o.headers_only = quick;
    char cache[4096];
    if (!quick && !nj_scan_cache_dir(cache, sizeof cache)) o.scan_cache = cache;   /* written, never read */
    nj_dataset ds;
    nj_problems pr;
    nj_problems_init(&pr);
    int n = nj_dataset_open(path, &o, &ds, &pr);
    nj_dataset_report(&ds, &o, &pr, stdout);
    if (n) printf("check-data: %d problem%s; training cannot use this data\n", n, n == 1 ? "" : "s");
    else if (quick) printf("check-data: OK in the headers (--quick: pixel data and near-duplicates not checked)\n");
    else printf("check-data: OK; training can use this data\n");
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    return n ? 1 : 0;
}
