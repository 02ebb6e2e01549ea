/* SPDX-License-Identifier: MIT
 * Benchmark of the lot report on the 12,500-device lot of plan-12500.yaml
 * (50 wafers x 250 devices): analysis, render and atomic write timed apart,
 * best of five, and the page size. Prints figures; timing is never a test.
 */
#define _XOPEN_SOURCE 700 /* nftw */
#include <fcntl.h>
#include <ftw.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include "cli.h"
#include "splitlot/report.h"

#define REPEATS 5
#define BENCH_LOT "BENCH-12500"

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* The plan sits beside this source file. */
static void plan_path(char *out, size_t size)
{
    const char *slash = strrchr(__FILE__, '/');
    int dir_len = slash ? (int)(slash - __FILE__) : 1;
    snprintf(out, size, "%.*s/plan-12500.yaml", dir_len, slash ? __FILE__ : ".");
}

/* A command of the tool in this process (argv NULL-terminated), its output
 * thrown away. */
static int run_quiet(const char **argv)
{
    int argc = 0;
    while (argv[argc])
        argc++;
    fflush(stdout);
    fflush(stderr);
    int out = dup(1), err = dup(2), null = open("/dev/null", O_WRONLY);
    dup2(null, 1);
    dup2(null, 2);
    int rc = cli_main(argc, (char **)argv);
    fflush(stdout);
    fflush(stderr);
    dup2(out, 1);
    dup2(err, 2);
    close(out);
    close(err);
    close(null);
    return rc;
}

static int build_lot(const char *plan, const char *db, const char *kind, const char *file)
{
    const char *predict[] = { "splitlot", "predict", plan, "--db", db, NULL };
    const char *ingest[] = { "splitlot", "ingest", "--lot", BENCH_LOT, kind, file, "--db", db, NULL };
    if (run_quiet(predict) != 0 || run_quiet(ingest) != 0) {
        fprintf(stderr, "bench_report: building the lot from %s failed\n", file);
        return -1;
    }
    return 0;
}

typedef struct {
    double analyse_s, render_s, write_s;
    sl_report_summary summary;
} timing;

static int time_once(timing *t, sl_store *store, sl_diag *diag)
{
    sl_analysis *a = NULL;
    sl_chart_buf buf;
    sl_chart_buf_init(&buf);
    double t0 = now_s();
    sl_status st = sl_analyze_lot(&a, store, BENCH_LOT, diag);
    double t1 = now_s();
    if (st == SL_OK)
        st = sl_report_render(&buf, &t->summary, store, a, NULL, diag);
    double t2 = now_s();
    if (st == SL_OK)
        st = sl_report_write_file("report.html", sl_chart_buf_str(&buf), buf.len, diag);
    double t3 = now_s();
    t->analyse_s = t1 - t0;
    t->render_s = t2 - t1;
    t->write_s = t3 - t2;
    sl_chart_buf_free(&buf);
    sl_analysis_free(a);
    return st == SL_OK ? 0 : -1;
}

static void keep_best(timing *best, const timing *t)
{
    double total = t->analyse_s + t->render_s + t->write_s;
    if (total < best->analyse_s + best->render_s + best->write_s)
        *best = *t;
}

static int measure(const char *db, const char *label)
{
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    timing best = { 1e9, 1e9, 1e9, { 0 } }, t;
    int rc = sl_store_open(&store, db, diag) == SL_OK ? 0 : -1;
    for (int i = 0; rc == 0 && i < REPEATS; i++) {
        rc = time_once(&t, store, diag);
        keep_best(&best, &t);
    }
    if (rc == 0) {
        const sl_report_summary *s = &best.summary;
        printf("%-8s %6zu dies  %5.2f MB  analyse %.3f s  render %.3f s  write %.3f s  "
               "total %.3f s  (%zu curves)\n",
               label, s->n_dies, (double)s->bytes / 1e6, best.analyse_s, best.render_s,
               best.write_s, best.analyse_s + best.render_s + best.write_s, s->n_curves);
    } else {
        fprintf(stderr, "bench_report: %s\n", sl_diag_last(diag));
    }
    sl_store_close(store);
    sl_diag_free(diag);
    return rc;
}

static int remove_entry(const char *path, const struct stat *st, int type, struct FTW *ftw)
{
    (void)st;
    (void)type;
    (void)ftw;
    return remove(path);
}

/* Depth first, so every folder is empty when its turn comes. */
static void remove_tree(const char *path) { nftw(path, remove_entry, 16, FTW_DEPTH | FTW_PHYS); }

/* A scratch folder under $TMPDIR, else under the working folder. */
static int make_scratch(char *dir, size_t size)
{
    const char *base = getenv("TMPDIR");
    snprintf(dir, size, "%s/splitlot-bench-report-XXXXXX", base && *base ? base : ".");
    /* absolute, as it is removed from elsewhere */
    return mkdtemp(dir) && chdir(dir) == 0 && getcwd(dir, size) ? 0 : -1;
}

int main(void)
{
    char plan[4096], dir[4096];
    plan_path(plan, sizeof plan);
    if (make_scratch(dir, sizeof dir) != 0) {
        perror("bench_report: scratch folder");
        return 1;
    }
    const char *simulate[] = { "splitlot", "simulate", plan, "--out", "sim", "--seed", "1",
                               "--true-doping", "anneal-350=0.3e12", NULL };
    int rc = run_quiet(simulate) == 0 ? 0 : 1;
    printf("report of %s (%s), best of %d:\n", BENCH_LOT, "plan-12500.yaml", REPEATS);
    /* results: every one of the 12,500 devices; sweeps: the probed ones,
     * fitted, with transfer curves on the page */
    if (rc == 0 && build_lot(plan, "results.db", "--results", "sim/results.csv") == 0)
        rc |= measure("results.db", "results") != 0;
    if (rc == 0 && build_lot(plan, "sweeps.db", "--sweeps", "sim/sweeps.csv") == 0)
        rc |= measure("sweeps.db", "sweeps") != 0;
    if (chdir("/") == 0)
        remove_tree(dir);
    return rc;
}
