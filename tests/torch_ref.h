/* tests/torch_ref.h — helpers for tests that compare nightjar with an outside
 * reference run in Python (PyTorch, NumPy through /usr/bin/python3): temporary
 * folders, locating and running the reference scripts, loading their .npy
 * results, and the relative-error measure used for every comparison. */
#ifndef NJ_TORCH_REF_H
#define NJ_TORCH_REF_H
#include <stddef.h>

#define REF_PYTHON "/usr/bin/python3"

/* Creates a fresh private folder ($TMPDIR or /tmp)/nj_<tag>_XXXXXX into out.
 * Returns 0, or -1 with a message in out. */
int ref_mkdtemp(char *out, size_t len, const char *tag);
/* Removes a folder made by ref_mkdtemp and everything under it. */
void ref_rmtree(const char *dir);
/* 1 when REF_PYTHON exists and is executable; otherwise 0 and a message. */
int ref_python_present(char *why, size_t len);
/* Path of tests/ref/<name>, found from the current directory or from the test
 * program's own location (build/tests/ under the repository).  Returns 0, or
 * -1 with a message in out. */
int ref_script_path(const char *name, char *out, size_t len);
/* Runs `REF_PYTHON script arg` through system(); returns its exit status
 * (0 on success, -1 if it could not be run, 128+signal if killed). */
int ref_run_python(const char *script, const char *arg);

/* Loads dir/name.npy; shape4 gets the shape left-padded with 1s to rank 4.
 * Returns malloc'd data or NULL with a message in err. */
float *ref_load(const char *dir, const char *name, int shape4[4], char *err, size_t errlen);

/* The relative error used by the reference tests:
 *   max_i |a_i - b_i| / max(max_i |b_i|, 1e-6)
 * with b the reference.  One scale per tensor, so small entries of a tensor
 * with large ones are not over-weighted; NaN anywhere gives +inf. */
double ref_rel_err(const float *a, const float *b, size_t n);

#endif
