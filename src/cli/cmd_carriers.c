/* SPDX-License-Identifier: MIT
 * `splitlot carriers`: the carrier physics at one point, either at a given
 * Fermi level or under a gate stack at a given gate voltage.
 */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <string.h>

#include "splitlot/physics.h"

static const char usage[] =
    "usage: splitlot carriers --fermi-eV E [--temperature-K T] [options]\n"
    "       splitlot carriers --stack SPEC [--gate-V V] [--cnp-V V] [--temperature-K T] [options]\n\n"
    "Carrier densities, thermal floor and quantum capacitance of graphene at one point.\n\n"
    "  --fermi-eV E              Fermi level relative to the Dirac point, eV\n"
    "  --stack SPEC              gate stack MATERIAL:THICKNESS_NM[:SIGMA_NM],... e.g. \"SiO2:90\"\n"
    "  --gate-V V                gate voltage, V (with --stack; default 0)\n"
    "  --cnp-V V                 charge-neutrality voltage, V (with --stack; default 0)\n"
    "  --temperature-K T         temperature, K, >= 0 (default 300)\n"
    "  --fermi-velocity-m-s V    Fermi velocity, m/s (default 1.0e6)\n"
    "  --format table|csv|json   output format (default table)\n"
    "  --help                    this text\n";

enum { OPT_FERMI = 1, OPT_STACK, OPT_GATE, OPT_CNP, OPT_TEMP, OPT_VF, OPT_FORMAT, OPT_HELP };

static const struct option options[] = {
    { "fermi-eV", required_argument, NULL, OPT_FERMI },
    { "stack", required_argument, NULL, OPT_STACK },
    { "gate-V", required_argument, NULL, OPT_GATE },
    { "cnp-V", required_argument, NULL, OPT_CNP },
    { "temperature-K", required_argument, NULL, OPT_TEMP },
    { "fermi-velocity-m-s", required_argument, NULL, OPT_VF },
    { "format", required_argument, NULL, OPT_FORMAT },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

typedef struct {
    int has_fermi, has_stack, has_gate, has_cnp;
    double fermi_eV, gate_V, cnp_V, temperature_K, vf_m_s;
    const char *stack;
    cli_format format;
} carriers_args;

static int parse_option(carriers_args *a, int opt, const char *val)
{
    switch (opt) {
    case OPT_FERMI: a->has_fermi = 1; return cli_parse_double("--fermi-eV", val, &a->fermi_eV);
    case OPT_STACK: a->has_stack = 1; a->stack = val; return 0;
    case OPT_GATE: a->has_gate = 1; return cli_parse_double("--gate-V", val, &a->gate_V);
    case OPT_CNP: a->has_cnp = 1; return cli_parse_double("--cnp-V", val, &a->cnp_V);
    case OPT_TEMP: return cli_parse_double("--temperature-K", val, &a->temperature_K);
    case OPT_VF: return cli_parse_double("--fermi-velocity-m-s", val, &a->vf_m_s);
    case OPT_FORMAT:
        if (cli_format_parse(val, &a->format) != 0) {
            cli_usage_error("--format: '%s' is not one of table, csv, json", val);
            return -1;
        }
        return 0;
    }
    return -1;
}

static int check_args(const carriers_args *a)
{
    if (a->temperature_K < 0.0)
        return cli_usage_error("--temperature-K: %g is below absolute zero", a->temperature_K);
    if (!(a->vf_m_s > 0.0))
        return cli_usage_error("--fermi-velocity-m-s: %g must be positive", a->vf_m_s);
    if (a->has_fermi == a->has_stack)
        return cli_usage_error("carriers: give exactly one of --fermi-eV or --stack");
    if (a->has_fermi && (a->has_gate || a->has_cnp))
        return cli_usage_error("carriers: --gate-V and --cnp-V go with --stack, not --fermi-eV");
    return 0;
}

/* Densities, floor and capacitance at Fermi level mu: the common part of both modes. */
static void add_point(cli_doc *doc, double mu_J, double t_K, double vf)
{
    double per_cm2 = SL_PER_CM2_PER_PER_M2;
    cli_doc_num(doc, "fermi_level_eV", mu_J / SL_SI_ELEMENTARY_CHARGE, 6);
    cli_doc_num(doc, "temperature_K", t_K, 6);
    cli_doc_num(doc, "electron_density_per_cm2", sl_physics_electron_density_per_m2(mu_J, t_K, vf) * per_cm2, 6);
    cli_doc_num(doc, "hole_density_per_cm2", sl_physics_hole_density_per_m2(mu_J, t_K, vf) * per_cm2, 6);
    cli_doc_num(doc, "net_density_per_cm2", sl_physics_net_density_per_m2(mu_J, t_K, vf) * per_cm2, 6);
    cli_doc_num(doc, "thermal_floor_per_cm2", sl_physics_thermal_floor_per_m2(t_K, vf) * per_cm2, 6);
    cli_doc_num(doc, "quantum_capacitance_uF_per_cm2",
                sl_physics_quantum_capacitance_F_per_m2(mu_J, t_K, vf) * SL_UF_CM2_PER_F_M2, 6);
    /* states per J per m^2 -> per eV per cm^2 */
    cli_doc_num(doc, "density_of_states_per_eV_cm2",
                sl_physics_dos_per_J_m2(mu_J, vf) * SL_SI_ELEMENTARY_CHARGE * per_cm2, 6);
}

static int run_stack(cli_doc *doc, const carriers_args *a)
{
    sl_layer layers[16];
    size_t count = 0;
    sl_diag *diag = sl_diag_new();
    sl_status st = sl_physics_stack_parse(layers, 16, &count, a->stack, diag);
    if (st != SL_OK) {
        int rc = cli_fail(st, diag);
        sl_diag_free(diag);
        return rc;
    }
    sl_diag_free(diag);
    double cg = sl_physics_stack_capacitance_F_per_m2(layers, count);
    double mu = 0.0;
    st = sl_physics_solve_fermi_J(&mu, a->gate_V, a->cnp_V, cg, a->temperature_K, a->vf_m_s);
    if (st != SL_OK)
        return cli_runtime_error("carriers: charge balance failed: %s", sl_status_str(st));
    cli_doc_str(doc, "stack", a->stack);
    cli_doc_num(doc, "gate_V", a->gate_V, 6);
    cli_doc_num(doc, "cnp_V", a->cnp_V, 6);
    cli_doc_num(doc, "gate_capacitance_nF_per_cm2", cg * SL_NF_CM2_PER_F_M2, 6);
    cli_doc_num(doc, "eot_nm", sl_physics_stack_eot_m(layers, count) / SL_M_PER_NM, 6);
    cli_doc_num(doc, "safe_gate_V", sl_physics_stack_safe_gate_V(layers, count, 0.5), 4);
    add_point(doc, mu, a->temperature_K, a->vf_m_s);
    cli_doc_num(doc, "gate_efficiency_per_cm2_V",
                sl_physics_gate_efficiency_per_m2_V(mu, a->temperature_K, cg, a->vf_m_s) *
                    SL_PER_CM2_PER_PER_M2, 6);
    return 0;
}

int cmd_carriers(int argc, char **argv)
{
    carriers_args a = { .temperature_K = 300.0, .vf_m_s = SL_SI_DEFAULT_FERMI_VELOCITY };
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        if (opt == OPT_HELP)
            return cli_print_help(usage);
        if (opt == '?' || opt == ':')
            return cli_bad_option("carriers", argv[optind - 1]);
        if (parse_option(&a, opt, optarg) != 0)
            return CLI_EXIT_USAGE;
    }
    if (optind < argc)
        return cli_usage_error("carriers: unexpected argument '%s'", argv[optind]);
    if (check_args(&a) != 0)
        return CLI_EXIT_USAGE;
    cli_doc *doc = cli_doc_new();
    int rc = 0;
    if (a.has_stack)
        rc = run_stack(doc, &a);
    else
        add_point(doc, a.fermi_eV * SL_SI_ELEMENTARY_CHARGE, a.temperature_K, a.vf_m_s);
    if (rc == 0 && cli_doc_print(doc, a.format, stdout) != 0)
        rc = cli_runtime_error("cannot write output");
    cli_doc_free(doc);
    return rc;
}
