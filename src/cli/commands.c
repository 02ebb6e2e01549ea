/* SPDX-License-Identifier: MIT
 * The table of commands and the top-level dispatch: global --help and
 * --version, then the command function with its own arguments.
 */
#include "cli.h"

#include <string.h>

#include "splitlot/physics.h"
#include "splitlot/text.h"

const cli_command cli_commands[] = {
    { "carriers", cmd_carriers, "the carrier physics at one point (Fermi level or gate voltage)" },
    { "check", cmd_check, "validate a lot plan; every problem at PLAN:LINE:COL" },
    { "layout", cmd_layout, "splits, wafers, loads, processing order, power per level" },
    { "predict", cmd_predict, "per split and temperature predictions, stored as a plan revision" },
    { "simulate", cmd_simulate, "write a synthetic lot drawn from the plan (demo data)" },
    { "ingest", cmd_ingest, "import device results or transfer sweeps (fitted) into a lot" },
    { "compare", cmd_compare, "every device against its prediction, flags, effects, failure list" },
    { "history", cmd_history, "level estimates across lots, pooled values, drift, calibrated YAML" },
    { "report", cmd_report, "one self-contained HTML report of a lot, with charts" },
    { "lots", cmd_lots, "the lot ids in the database" },
    { "db", cmd_db, "copy a lot or every lot between databases (SQLite files, PostgreSQL)" },
    { NULL, NULL, NULL },
};

const cli_command *cli_command_find(const char *name)
{
    for (const cli_command *c = cli_commands; c->name; c++)
        if (strcmp(c->name, name) == 0)
            return c;
    return NULL;
}

static int print_overview(FILE *out)
{
    fputs("usage: splitlot <command> [options]\n\n"
          "Plan graphene FET split lots, predict their neutrality points, import\n"
          "measurements and compare every device with its prediction.\n\ncommands:\n",
          out);
    for (const cli_command *c = cli_commands; c->name; c++)
        fprintf(out, "  %-10s %s\n", c->name, c->summary);
    fputs("\n'splitlot <command> --help' for a command's options; 'splitlot --version'.\n", out);
    return CLI_EXIT_OK;
}

int cli_main(int argc, char **argv)
{
    sl_physics_init();
    if (argc < 2) {
        print_overview(stderr);
        return CLI_EXIT_USAGE;
    }
    const char *name = argv[1];
    if (strcmp(name, "--help") == 0 || strcmp(name, "-h") == 0 || strcmp(name, "help") == 0)
        return print_overview(stdout);
    if (strcmp(name, "--version") == 0 || strcmp(name, "version") == 0) {
        printf("splitlot %s\n", SL_VERSION);
        return CLI_EXIT_OK;
    }
    const cli_command *cmd = cli_command_find(name);
    if (!cmd) {
        const char *names[sizeof cli_commands / sizeof cli_commands[0]];
        size_t n = 0;
        for (const cli_command *c = cli_commands; c->name; c++)
            names[n++] = c->name;
        char hint[96];
        return cli_usage_error("unknown command '%s'%s (see 'splitlot --help')", name,
                               sl_text_did_you_mean(hint, sizeof hint, name, names, n));
    }
    if (argc == 3 && strcmp(argv[2], "--version") == 0) { /* --version everywhere */
        printf("splitlot %s\n", SL_VERSION);
        return CLI_EXIT_OK;
    }
    cli_reset_getopt();
    return cmd->run(argc - 1, argv + 1);
}
