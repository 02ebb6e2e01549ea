/* SPDX-License-Identifier: MIT
 * `splitlot lots`: the lot ids a database holds, in creation order; shell
 * completion reads them with --format csv.
 */
#include "cli.h"

#include <getopt.h>
#include <stdlib.h>

#include "splitlot/store.h"

static const char usage[] =
    "usage: splitlot lots [--db FILE] [--format table|csv|json]\n\n"
    "The lot ids in the database, in the order they were first stored.\n\n"
    "  --db FILE                 database (default $SPLITLOT_DB or splitlot.db)\n"
    "  --format table|csv|json   output format (default table)\n"
    "  --help                    this text\n";

enum { OPT_DB = 1, OPT_FORMAT, OPT_HELP };

static const struct option options[] = {
    { "db", required_argument, NULL, OPT_DB },
    { "format", required_argument, NULL, OPT_FORMAT },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

static int print_lots(char **names, size_t n, cli_format format)
{
    cli_doc *doc = cli_doc_new();
    cli_table *t = cli_doc_table(doc, "lots", "lots");
    cli_table_col_str(t, "lot", "lot");
    for (size_t i = 0; i < n; i++) {
        cli_table_row(t);
        cli_cell_str(t, names[i]);
    }
    int rc = cli_doc_print(doc, format, stdout) == 0 ? CLI_EXIT_OK
                                                     : cli_runtime_error("cannot write output");
    cli_doc_free(doc);
    return rc;
}

int cmd_lots(int argc, char **argv)
{
    cli_format format = CLI_FORMAT_TABLE;
    const char *db = NULL;
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        switch (opt) {
        case OPT_HELP: return cli_print_help(usage);
        case OPT_DB: db = optarg; break;
        case OPT_FORMAT:
            if (cli_format_parse(optarg, &format) != 0)
                return cli_usage_error("--format: '%s' is not one of table, csv, json", optarg);
            break;
        default: return cli_bad_option("lots", argv[optind - 1]);
        }
    }
    if (optind < argc)
        return cli_usage_error("lots: unexpected argument '%s'", argv[optind]);
    db = cli_db_path(db);
    if (cli_require_db(db) != 0)
        return CLI_EXIT_USAGE;
    sl_diag *diag = sl_diag_new();
    sl_store *store = NULL;
    char **names = NULL;
    size_t n = 0;
    sl_status st = sl_store_open(&store, db, diag);
    if (st == SL_OK)
        st = sl_store_list_lots(store, &names, &n, diag);
    int rc = st == SL_OK ? print_lots(names, n, format) : cli_fail(st, diag);
    for (size_t i = 0; i < n; i++)
        free(names[i]);
    free(names);
    sl_store_close(store);
    sl_diag_free(diag);
    return rc;
}
