/* SPDX-License-Identifier: MIT
 * `splitlot db copy --from A --to B [--lot ID]`: a lot, or every lot, moved
 * between two databases of either backend (SQLite files, PostgreSQL URLs),
 * in one transaction of the destination, checked by a checksum of each lot.
 */
#include "cli.h"

#include <getopt.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/store.h"

static const char usage[] =
    "usage: splitlot db copy --from DB --to DB [--lot ID] [--format table|csv|json]\n\n"
    "Copy a lot, or every lot, from one database to another: either may be an\n"
    "SQLite file or a postgresql:// URL (the password from ~/.pgpass or\n"
    "PGPASSWORD, never on the command line). The destination is created when\n"
    "missing; a lot it holds already is refused. Each copied lot must have its\n"
    "source's checksum, or nothing is written.\n\n"
    "  --from DB                 the database to read\n"
    "  --to DB                   the database to write\n"
    "  --lot ID                  only this lot (default every lot)\n"
    "  --format table|csv|json   output format (default table)\n"
    "  --help                    this text\n";

enum { OPT_FROM = 1, OPT_TO, OPT_LOT, OPT_FORMAT, OPT_HELP };

static const struct option options[] = {
    { "from", required_argument, NULL, OPT_FROM },
    { "to", required_argument, NULL, OPT_TO },
    { "lot", required_argument, NULL, OPT_LOT },
    { "format", required_argument, NULL, OPT_FORMAT },
    { "help", no_argument, NULL, OPT_HELP },
    { NULL, 0, NULL, 0 },
};

typedef struct {
    const char *from, *to, *lot;
    cli_format format;
} copy_args;

static int parse_args(copy_args *a, int argc, char **argv)
{
    int opt;
    while ((opt = getopt_long(argc, argv, "", options, NULL)) != -1) {
        switch (opt) {
        case OPT_HELP: return cli_print_help(usage) == CLI_EXIT_OK ? -2 : -1;
        case OPT_FROM: a->from = optarg; break;
        case OPT_TO: a->to = optarg; break;
        case OPT_LOT: a->lot = optarg; break;
        case OPT_FORMAT:
            if (cli_format_parse(optarg, &a->format) != 0)
                return cli_usage_error("--format: '%s' is not one of table, csv, json", optarg), -1;
            break;
        default: return cli_bad_option("db copy", argv[optind - 1]), -1;
        }
    }
    if (optind < argc)
        return cli_usage_error("db copy: unexpected argument '%s'", argv[optind]), -1;
    if (!a->from || !a->to)
        return cli_usage_error("db copy: --from and --to are both needed"), -1;
    return 0;
}

static int print_copied(char **names, char (*sums)[65], size_t n, cli_format format)
{
    cli_doc *doc = cli_doc_new();
    cli_table *t = cli_doc_table(doc, "copied", "copied");
    cli_table_col_str(t, "lot", "lot");
    cli_table_col_str(t, "sha256", "checksum");
    for (size_t i = 0; i < n; i++) {
        cli_table_row(t);
        cli_cell_str(t, names[i]);
        cli_cell_str(t, sums[i]);
    }
    int rc = cli_doc_print(doc, format, stdout) == 0 ? CLI_EXIT_OK
                                                     : cli_runtime_error("cannot write output");
    cli_doc_free(doc);
    return rc;
}

/* Copy each lot and compare its checksum on both sides (before the commit,
 * so a copy that differs writes nothing). */
static sl_status copy_lots(sl_store *dst, sl_store *src, char **names, char (*sums)[65],
                           size_t n, sl_diag *diag)
{
    sl_status st = SL_OK;
    for (size_t i = 0; st == SL_OK && i < n; i++) {
        char copied[65];
        st = sl_store_copy_lot(dst, src, names[i], diag);
        if (st == SL_OK)
            st = sl_store_checksum(src, sums[i], names[i], diag);
        if (st == SL_OK)
            st = sl_store_checksum(dst, copied, names[i], diag);
        if (st == SL_OK && strcmp(sums[i], copied) != 0) {
            sl_diag_error(diag, "the copy of lot '%s' does not match its source (checksum %s, "
                                "source %s); nothing was written", names[i], copied, sums[i]);
            st = SL_EDB;
        }
    }
    return st;
}

static sl_status run_copy(const copy_args *a, char ***names, size_t *n, char (**sums)[65],
                          sl_diag *diag)
{
    sl_store *src = NULL, *dst = NULL;
    sl_status st = sl_store_open(&src, a->from, diag);
    if (st == SL_OK)
        st = sl_store_open(&dst, a->to, diag);
    if (st == SL_OK)
        st = sl_store_begin_read(src, diag);
    if (st == SL_OK && a->lot) {
        *names = calloc(1, sizeof **names);
        if (*names && ((*names)[0] = strdup(a->lot)))
            *n = 1;
        else
            st = SL_ENOMEM;
    } else if (st == SL_OK) {
        st = sl_store_list_lots(src, names, n, diag);
    }
    if (st == SL_OK && !(*sums = calloc(*n ? *n : 1, sizeof **sums)))
        st = SL_ENOMEM;
    if (st == SL_OK)
        st = sl_store_begin(dst, diag);
    if (st == SL_OK)
        st = copy_lots(dst, src, *names, *sums, *n, diag);
    if (st == SL_OK)
        st = sl_store_commit(dst, diag);
    else if (dst)
        sl_store_rollback(dst);
    if (src)
        sl_store_rollback(src);
    sl_store_close(src);
    sl_store_close(dst);
    return st;
}

static int cmd_db_copy(int argc, char **argv)
{
    copy_args a = { .format = CLI_FORMAT_TABLE };
    int parsed = parse_args(&a, argc, argv);
    if (parsed == -2)
        return CLI_EXIT_OK;
    if (parsed != 0)
        return CLI_EXIT_USAGE;
    if (cli_require_db(a.from) != 0)
        return CLI_EXIT_USAGE;
    sl_diag *diag = sl_diag_new();
    char **names = NULL;
    char(*sums)[65] = NULL;
    size_t n = 0;
    sl_status st = run_copy(&a, &names, &n, &sums, diag);
    int rc = st == SL_OK ? print_copied(names, sums, n, a.format) : cli_fail(st, diag);
    if (st == SL_OK)
        fprintf(stderr, "splitlot: copied %zu lot%s, each with its source's checksum\n", n,
                n == 1 ? "" : "s");
    for (size_t i = 0; i < n; i++)
        free(names[i]);
    free(names);
    free(sums);
    sl_diag_free(diag);
    return rc;
}

int cmd_db(int argc, char **argv)
{
    if (argc >= 2 && strcmp(argv[1], "copy") == 0)
        return cmd_db_copy(argc - 1, argv + 1);
    if (argc >= 2 && (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0))
        return cli_print_help(usage);
    return cli_usage_error("db: expected 'copy' (see 'splitlot db --help')");
}
