/* tests/test_rng.c — the counter-keyed normal noise (nn/rng.c
 * nj_rng_add_normals) that breaks ties in the auto-mask.
 *
 * Sources of truth:
 *   - the standard normal CDF Φ(x) = ½·erfc(−x/√2) (C99 erfc) and the
 *     Kolmogorov–Smirnov statistic with its asymptotic 1 % critical value
 *     1.628/√n (Smirnov 1948; the table value is quoted from memory);
 *   - moments: mean within 5 standard errors of 0, variance within 5 standard
 *     errors (√(2/n)) of 1 — 5 is a common-practice margin, not from a
 *     reference (a normal statistic lands outside ±5 standard errors with
 *     probability 5.7e-7, erfc(5/√2)); √(2/n), the standard error of the
 *     sample variance of n normal values (2σ⁴/(n−1) ≈ 2/n), is the textbook
 *     formula, quoted from memory;
 *   - structural properties that the callers rely on: shards of a batch get
 *     the values of the whole batch at their positions, the values do not
 *     depend on the thread count, the generator advances by one draw. */
#include "nn/rng.h"
#include "tests/check.h"
#include <math.h>
#include <omp.h>
#include <stdlib.h>
#include <string.h>

#define NS 1000000

static int cmp_float(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

static void test_distribution(void)
{
    float *z = calloc(NS, sizeof(float));
    nj_rng r;
    nj_rng_seed(&r, 5);
    nj_rng_add_normals(&r, z, NS, 0, 1.0f);
    double s = 0, s2 = 0;
    for (int i = 0; i < NS; i++) s += z[i];
    double mean = s / NS;
    for (int i = 0; i < NS; i++) s2 += (z[i] - mean) * (z[i] - mean);
    double var = s2 / (NS - 1);
    /* 5 standard errors (1/√n for the mean, √(2/n) for the variance): a
     * common-practice margin (outside it: probability 5.7e-7), see the header */
    check(fabs(mean) < 5.0 / sqrt(NS), "normals: mean near 0", "mean %.3g", mean);
    check(fabs(var - 1) < 5.0 * sqrt(2.0 / NS), "normals: variance near 1", "variance %.5f", var);
    qsort(z, NS, sizeof(float), cmp_float);
    double d = 0;
    for (int i = 0; i < NS; i++) {
        double F = 0.5 * erfc(-z[i] / sqrt(2.0));
        d = fmax(d, fmax(fabs(F - (double)i / NS), fabs((double)(i + 1) / NS - F)));
    }
    /* 1.628: the asymptotic 1 % critical value of √n·D, quoted from memory (Smirnov
     * 1948's table); it agrees with the leading term of Kolmogorov's distribution,
     * 2·exp(−2x²) = 0.01 → x = √(−ln(0.005)/2) = 1.6276 */
    check(d < 1.628 / sqrt(NS), "normals: Kolmogorov-Smirnov against the normal CDF",
          "D = %.3g (1%% critical value %.3g)", d, 1.628 / sqrt(NS));
    free(z);
}

static void test_shards_threads_state(void)
{
    enum { K = 50000 };
    static float whole[2 * K], a[K], b[K], one[2 * K], twice[2 * K];
    nj_rng r, ra, rb, copy;
    nj_rng_seed(&r, 9);
    copy = ra = rb = r;
    for (int i = 0; i < 2 * K; i++) whole[i] = one[i] = twice[i] = (float)(i % 7);
    for (int i = 0; i < K; i++) { a[i] = (float)(i % 7); b[i] = (float)((K + i) % 7); }
    int saved = omp_get_max_threads();
    omp_set_num_threads(2);
    nj_rng_add_normals(&r, whole, 2 * K, 0, 0.5f);
    nj_rng_add_normals(&ra, a, K, 0, 0.5f);
    nj_rng_add_normals(&rb, b, K, K, 0.5f);
    check(!memcmp(whole, a, sizeof a) && !memcmp(whole + K, b, sizeof b),
          "normals: two shards equal the whole batch at their positions", "values differ");
    nj_rng_next(&copy);
    check(!memcmp(&r, &copy, sizeof r) && !memcmp(&ra, &copy, sizeof r) && !memcmp(&rb, &copy, sizeof r),
          "normals: the generator advances by exactly one draw", "state differs");
    omp_set_num_threads(1);
    nj_rng_seed(&r, 9);
    nj_rng_add_normals(&r, one, 2 * K, 0, 0.5f);
    check(!memcmp(whole, one, sizeof one), "normals: 1 and 2 threads give the same values",
          "values differ");
    nj_rng_seed(&r, 9);
    nj_rng_add_normals(&r, twice, 2 * K, 0, 1.0f);
    double d = 0;
    for (int i = 0; i < 2 * K; i++) d = fmax(d, fabs((twice[i] - i % 7) - 2 * (one[i] - i % 7)));
    check(d < 1e-5, "normals: added to dst, scaled", "max |(dst1 - x) - 2 (dst.5 - x)| %.3g", d);
    omp_set_num_threads(saved);
}

int main(void)
{
    test_distribution();
    test_shards_threads_state();
    return test_exit();
}
