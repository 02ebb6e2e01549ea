/* SPDX-License-Identifier: MIT
 * The command layer: one function per command (src/cli/cmd_<name>.c), the
 * dispatch table (commands.c) and helpers shared by the commands.
 *
 * Adding a command, the checklist:
 *   1. src/cli/cmd_<name>.c with int cmd_<name>(int argc, char **argv), its
 *      usage text beside its option table, thin over the library;
 *   2. a line in the table of commands.c and a prototype below;
 *   3. tests: tests/test_cli_<name>.c or cases in an existing CLI suite;
 *   4. a line in README.md (tour) and DEVELOPERS.md (map);
 *   5. the command and every option in man/splitlot.1.scd (ctest man_drift).
 */
#ifndef SL_CLI_H
#define SL_CLI_H

#include <stdio.h>

#include "output.h"
#include "splitlot/error.h"

/* Exit codes (docs/formats.md, "The command line"). */
enum { CLI_EXIT_OK = 0, CLI_EXIT_RUNTIME = 1, CLI_EXIT_USAGE = 2, CLI_EXIT_FLAGGED = 3 };

typedef struct {
    const char *name;
    int (*run)(int argc, char **argv);
    const char *summary;
} cli_command;

/* The table of commands, ended by a zero entry. */
extern const cli_command cli_commands[];
const cli_command *cli_command_find(const char *name);

/* Entry point shared by main() and the tests: argv[0] is the program name. */
int cli_main(int argc, char **argv);

int cmd_carriers(int argc, char **argv);
int cmd_check(int argc, char **argv);
int cmd_layout(int argc, char **argv);
int cmd_predict(int argc, char **argv);
int cmd_simulate(int argc, char **argv);
int cmd_ingest(int argc, char **argv);
int cmd_compare(int argc, char **argv);
int cmd_history(int argc, char **argv);
int cmd_report(int argc, char **argv);
int cmd_lots(int argc, char **argv);
int cmd_db(int argc, char **argv);

/* "splitlot: error: <message>" on stderr; returns CLI_EXIT_USAGE. */
int cli_usage_error(const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 1, 2)))
#endif
    ;
/* "splitlot: error: <message>" on stderr; returns CLI_EXIT_RUNTIME. */
int cli_runtime_error(const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 1, 2)))
#endif
    ;

/* Print every message (sorted by location) to stderr, one line each; messages
 * without a file get the "splitlot: " prefix. Returns the number of errors. */
size_t cli_print_diag(sl_diag *diag);

/* Exit code for a failed library call: prints the diagnostics (or the status
 * name when there are none) and maps the status (input 2, others 1). */
int cli_fail(sl_status st, sl_diag *diag);

/* Parse a finite number for option opt; prints the error and returns -1 on
 * failure. */
int cli_parse_double(const char *opt, const char *text, double *out);
/* Parse a whole number >= min. */
int cli_parse_long(const char *opt, const char *text, long min, long *out);

/* --temperature-K: a finite temperature above 0 K. */
int cli_parse_temperature(const char *text, double *out);
/* --step: a process step name, 1 to 64 bytes of printable text. */
int cli_check_step(const char *text);

/* Database path: the option value, else $SPLITLOT_DB, else "splitlot.db". */
const char *cli_db_path(const char *option_value);

/* A command that reads the database needs it to exist: otherwise one error
 * line (and no empty database left behind); returns 0 when it exists. */
int cli_require_db(const char *path);

/* A "still working" line for long commands: on a terminal only, shown once
 * the work has run 2 s, wiped by cli_busy_stop (cli_busy.c). Stop before
 * printing anything else. Start returns NULL off a terminal; stopping NULL
 * is a no-op. */
typedef struct cli_busy cli_busy;
cli_busy *cli_busy_start(const char *what);
void cli_busy_stop(cli_busy *b);

/* Usage text printed for --help; returns CLI_EXIT_OK. */
int cli_print_help(const char *text);
/* Unknown option or missing argument: one line with a hint; returns 2. */
int cli_bad_option(const char *command, const char *arg);

/* The treatment names of a plan's split into names (at most max); returns
 * how many. The strings belong to the plan. */
struct sl_plan;
int cli_split_treatment_names(const struct sl_plan *plan, size_t split, const char **names,
                              size_t max);

/* Reset getopt state so a command can be called more than once in a process. */
void cli_reset_getopt(void);

/* The caution printed with layout and predict output (docs/design.md, "Safety"). */
extern const char cli_safety_caution[];

#endif
