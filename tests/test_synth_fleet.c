/* tests/test_synth_fleet.c — the fleet nuisances of `nightjar synth` and the
 * dataset key that describes the followed vehicle's masks.
 *  - "lead_mask": parsed and resolved, nj_lead_mask_path names
 *    LEAD_MASK_DIR/<frame stem>.png, a missing folder is a problem naming the
 *    sequence. */
#include "data/dataset.h"
#include "data/image.h"
#include "data/synth.h"
#include "tests/check.h"
#include "tests/test_data_util.h"
#include <sys/stat.h>

static char dir[64];

static void write_text(const char *path, const char *text)
{
    FILE *f = fopen(path, "w");
    if (f) { fputs(text, f); fclose(f); }
}

/* Opens DIR/NAME.json written from `seq_extra` added to one sequence of the
 * small set in DIR/small.  Returns the number of problems. */
static int open_with(const char *name, const char *seq_extra, nj_dataset *ds, nj_problems *pr)
{
    char path[256], text[1024];
    snprintf(path, sizeof path, "%s/small/%s.json", dir, name);
    snprintf(text, sizeof text,
             "{\"sequences\": [{\"name\": \"s\", \"images\": \"yard-00/cam0\",\n"
             " \"camera\": {\"fx\": 20, \"fy\": 20, \"cx\": 16, \"cy\": 12}%s}]}\n", seq_extra);
    write_text(path, text);
    nj_data_options o;
    nj_data_options_default(&o);
    nj_problems_init(pr);
    return nj_dataset_open(path, &o, ds, pr);
}

static int has_problem(const nj_problems *pr, const char *a, const char *b)
{
    for (int i = 0; i < pr->n; i++)
        if (strstr(pr->msg[i], a) && strstr(pr->msg[i], b)) return 1;
    return 0;
}

static void test_lead_mask_key(void)
{
    nj_synth_config c;
    nj_synth_config_default(&c);
    char out[128], err[512], lead[160];
    snprintf(out, sizeof out, "%s/small", dir);
    c.out = out;
    c.frames = 4;
    c.sequences = 1;
    c.width = 32;
    c.height = 24;
    if (!check(!nj_synth_run(&c, err, sizeof err), "fleet_small_set_renders", "%s", err)) return;
    snprintf(lead, sizeof lead, "%s/masks", out);
    mkdir(lead, 0755);
    nj_dataset ds;
    nj_problems pr;
    int n = open_with("good", ",\n \"lead_mask\": \"masks\"", &ds, &pr);
    char *p = ds.nseq == 1 ? nj_lead_mask_path(&ds.seq[0], 2) : NULL;
    char want[200];
    snprintf(want, sizeof want, "%s/masks/000002.png", out);
    check(n == 0 && p && !strcmp(p, want), "lead_mask_path_resolved", "problems %d, path %s (want %s)", n,
          p ? p : "(null)", want);
    free(p);
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    n = open_with("plain", "", &ds, &pr);
    check(n == 0 && ds.nseq == 1 && !ds.seq[0].lead_mask_dir && !nj_lead_mask_path(&ds.seq[0], 0),
          "lead_mask_absent_is_null", "problems %d", n);
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
    n = open_with("missing", ",\n \"lead_mask\": \"nowhere\"", &ds, &pr);
    check(n == 1 && has_problem(&pr, "nowhere", "\"lead_mask\" of sequence \"s\""), "lead_mask_missing_folder_problem",
          "problems %d: %s", n, pr.n ? pr.msg[0] : "");
    nj_dataset_free(&ds);
    nj_problems_free(&pr);
}

int main(void)
{
    if (!check(tdu_tmpdir(dir, sizeof dir) == 0, "fleet_tmpdir", "mkdtemp failed")) return test_exit();
    test_lead_mask_key();
    tdu_rmtree(dir);
    return test_exit();
}
