/* SPDX-License-Identifier: MIT
 * `splitlot simulate PLAN --out DIR`: write a synthetic lot (results.csv,
 * sweeps.csv and its truth) drawn from the plan's model, for demos and tests.
 */
#include "cli.h"

#include <errno.h>
#include <getopt.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "splitlot/layout.h"
#include "splitlot/plan.h"
#include "splitlot/simulate.h"

static const char usage[] =
    "usage: splitlot simulate PLAN --out DIR [options]\n\n"
    "Draw a synthetic lot from the plan's own model and write DIR/results.csv,\n"
    "DIR/sweeps.csv, and the truth: DIR/truth.csv (every device) and\n"
    "DIR/levels.csv (the doping each level really delivered). Invented data,\n"
    "for demos, tests and benchmarks.\n\n"
    "  --out DIR                 output folder (created if missing)\n"
    "  --seed N                  random seed (default: the plan's seed)\n"
    "  --points N                points per sweep (default 201)\n"
    "  --noise-rel X             relative noise of each resistance (default 0.005)\n"
    "  --fault-fraction X        devices made faulty (default 0.02)\n"
    "  --shifted-fraction X      good devices given an odd 3 V shift (default 0.005)\n"
    "  --devices-per-wafer N     override the plan's devices per wafer\n"
    "  --true-doping LEVEL=N     the doping (cm^-2) a dielectric, treatment or\n"
    "                            'baseline' really delivers (repeatable)\n"
    "  --draw-levels             draw each level's true doping from the plan's sigma\n"
    "                            (default: levels deliver their planned means)\n"
    "  --no-sweeps               write results.csv and the truth only\n"
    "  --temperature-K T         measure at this plan temperature only (default:\n"
    "                            every device at every temperature of the plan)\n"
    "  --help                    this text\n";

enum { OPT_OUT = 1, OPT_SEED, OPT_POINTS, OPT_NOISE, OPT_FAULT, OPT_SHIFTED, OPT_DEVICES, OPT_TRUE, OPT_NO_SWEEPS, OPT_DRAW, OPT_TEMPERATURE, OPT_HELP };

static const struct option options[] = {
    { "out", required_argument, NULL, OPT_OUT },
    { "seed", required_argument, NULL, OPT_SEED },
    { "points", required_argument, NULL, OPT_POINTS },
    { "noise-rel", required_argument, NULL, OPT_NOISE },
    { "fault-fraction", required_argument, NULL, OPT_FAULT },
    { "shifted-fraction", required_argument, NULL, OPT_SHIFTED },
    { "devices-per-wafer", required_argument, NULL, OPT_DEVICES },
    { "true-doping", required_argument, NULL, OPT_TRUE },
    { "no-sweeps", no_argument, NULL, OPT_NO_SWEEPS },
    { "draw-levels", no_argument, NULL, OPT_DRAW },
    { "temperature-K", required_argument, NULL, OPT_TEMPERATURE },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

#define MAX_OVERRIDES 64

typedef struct {
    const char *out;
    int has_seed;
    long seed;
    sl_simulate_options sim;
    sl_simulate_override overrides[MAX_OVERRIDES];
    char override_names[MAX_OVERRIDES][128];
} simulate_args;

static int parse_override(simulate_args *a, const char *text)
{
    const char *eq = strchr(text, '=');
    if (!eq || eq == text || (size_t)(eq - text) >= sizeof a->override_names[0])
        return cli_usage_error("--true-doping: '%s' is not LEVEL=DOPING_PER_CM2", text), -1;
    if (a->sim.n_overrides == MAX_OVERRIDES)
        return cli_usage_error("--true-doping: at most %d levels", MAX_OVERRIDES), -1;
    size_t k = a->sim.n_overrides;
    memcpy(a->override_names[k], text, (size_t)(eq - text));
    a->override_names[k][eq - text] = '\0';
    if (cli_parse_double("--true-doping", eq + 1, &a->overrides[k].doping_per_cm2) != 0)
        return -1;
    a->overrides[k].level = a->override_names[k];
    a->sim.n_overrides++;
    return 0;
}

static int parse_fraction(const char *opt, const char *text, double *out)
{
    if (cli_parse_double(opt, text, out) != 0)
        return -1;
    if (*out < 0.0 || *out > 1.0)
        return cli_usage_error("%s: %g is not between 0 and 1", opt, *out), -1;
    return 0;
}

static int parse_option(simulate_args *a, int opt, const char *val)
{
    long n;
    switch (opt) {
    case OPT_OUT: a->out = val; return 0;
    case OPT_SEED:
        a->has_seed = 1;
        if (cli_parse_long("--seed", val, 0, &a->seed) != 0)
            return -1;
        /* the generator takes 32 bits: a larger seed would repeat a smaller one */
        if (a->seed > 4294967295L)
            return cli_usage_error("--seed: '%s' is not a whole number from 0 to 4294967295",
                                   val), -1;
        return 0;
    case OPT_POINTS:
        if (cli_parse_long("--points", val, 8, &n) != 0)
            return -1;
        a->sim.points_per_sweep = n;
        return 0;
    case OPT_NOISE: return parse_fraction("--noise-rel", val, &a->sim.noise_rel);
    case OPT_FAULT: return parse_fraction("--fault-fraction", val, &a->sim.fault_fraction);
    case OPT_SHIFTED: return parse_fraction("--shifted-fraction", val, &a->sim.shifted_fraction);
    case OPT_DEVICES:
        if (cli_parse_long("--devices-per-wafer", val, 1, &n) != 0)
            return -1;
        a->sim.devices_per_wafer = n;
        return 0;
    case OPT_TRUE: return parse_override(a, val);
    case OPT_NO_SWEEPS: a->sim.write_sweeps = 0; return 0;
    case OPT_DRAW: a->sim.draw_levels = 1; return 0;
    case OPT_TEMPERATURE: return cli_parse_temperature(val, &a->sim.only_temperature_K);
    }
    return -1;
}

static int make_dir(const char *dir)
{
    if (mkdir(dir, 0777) == 0 || errno == EEXIST)
        return 0;
    return cli_runtime_error("simulate: cannot create folder '%s': %s", dir, strerror(errno));
}

static int run_simulate(simulate_args *a, const char *plan_path)
{
    sl_diag *diag = sl_diag_new();
    sl_plan *plan = NULL;
    sl_layout *layout = NULL;
    sl_simulate_summary sum;
    sl_status st = sl_plan_load(&plan, plan_path, diag);
    if (st == SL_OK)
        st = sl_layout_build(&layout, plan, diag);
    int rc = st == SL_OK ? make_dir(a->out) : CLI_EXIT_OK;
    if (st == SL_OK && rc == CLI_EXIT_OK) {
        a->sim.seed = a->has_seed ? (uint64_t)a->seed : plan->seed;
        a->sim.overrides = a->overrides;
        st = sl_simulate_lot(&sum, plan, layout, &a->sim, a->out, diag);
    }
    if (st != SL_OK)
        rc = cli_fail(st, diag);
    else if (rc == CLI_EXIT_OK)
        printf("simulated lot %s: %ld wafers, %ld devices (%ld faulty, %ld shifted), %ld sweep rows in %s/\n",
               plan->lot, sum.wafers, sum.devices, sum.faulty, sum.shifted, sum.sweep_rows, a->out);
    sl_layout_free(layout);
    sl_plan_free(plan);
    sl_diag_free(diag);
    return rc;
}

int cmd_simulate(int argc, char **argv)
{
    simulate_args a;
    memset(&a, 0, sizeof a);
    sl_simulate_options_default(&a.sim, 0);
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        if (opt == OPT_HELP)
            return cli_print_help(usage);
        if (opt == '?' || opt == ':')
            return cli_bad_option("simulate", argv[optind - 1]);
        if (parse_option(&a, opt, optarg) != 0)
            return CLI_EXIT_USAGE;
    }
    if (optind + 1 != argc)
        return cli_usage_error("simulate: give exactly one plan file (see 'splitlot simulate --help')");
    if (!a.out)
        return cli_usage_error("simulate: --out DIR is required");
    return run_simulate(&a, argv[optind]);
}
