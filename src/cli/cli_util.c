/* SPDX-License-Identifier: MIT
 * Helpers shared by the command files: error lines, option value parsing,
 * database path choice, printing of collected diagnostics.
 */
#include "cli.h"

#include <errno.h>
#include <getopt.h>
#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "splitlot/plan.h"
#include "splitlot/store.h"

const char cli_safety_caution[] =
    "caution: gate bias near breakdown destroys devices and doping treatments can be "
    "hazardous;\nthese figures are estimates, not sign-off: follow your site's safety "
    "rules and licensed practice.";

static void vprint_error(const char *fmt, va_list ap)
{
    fputs("splitlot: error: ", stderr);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
}

int cli_usage_error(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vprint_error(fmt, ap);
    va_end(ap);
    return CLI_EXIT_USAGE;
}

int cli_runtime_error(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vprint_error(fmt, ap);
    va_end(ap);
    return CLI_EXIT_RUNTIME;
}

size_t cli_print_diag(sl_diag *diag)
{
    char line[4096];
    sl_diag_sort(diag);
    for (size_t i = 0; i < sl_diag_size(diag); i++) {
        const sl_diag_msg *m = sl_diag_get(diag, i);
        sl_diag_format(m, line, sizeof line);
        fprintf(stderr, "%s%s\n", m->file ? "" : "splitlot: ", line);
    }
    return sl_diag_count(diag, SL_SEV_ERROR);
}

int cli_fail(sl_status st, sl_diag *diag)
{
    if (cli_print_diag(diag) == 0)
        fprintf(stderr, "splitlot: error: %s\n", sl_status_str(st));
    return sl_status_exit_code(st);
}

int cli_parse_double(const char *opt, const char *text, double *out)
{
    char *end = NULL;
    errno = 0;
    double v = text ? strtod(text, &end) : NAN;
    if (!text || end == text || *end != '\0' || errno == ERANGE || !isfinite(v)) {
        cli_usage_error("%s: '%s' is not a finite number", opt, text ? text : "");
        return -1;
    }
    *out = v;
    return 0;
}

int cli_parse_temperature(const char *text, double *out)
{
    if (cli_parse_double("--temperature-K", text, out) != 0)
        return -1;
    if (*out <= 0.0) {
        cli_usage_error("--temperature-K: '%s' is not a temperature above 0 K", text);
        return -1;
    }
    return 0;
}

int cli_check_step(const char *text)
{
    size_t n = strlen(text);
    int printable = n > 0 && n <= 64;
    for (size_t i = 0; printable && i < n; i++)
        printable = (unsigned char)text[i] >= 0x20 && text[i] != 0x7f;
    if (!printable) {
        cli_usage_error("--step: '%s' is not a step name (1 to 64 printable bytes)", text);
        return -1;
    }
    return 0;
}

int cli_parse_long(const char *opt, const char *text, long min, long *out)
{
    char *end = NULL;
    errno = 0;
    long v = text ? strtol(text, &end, 10) : 0;
    if (!text || end == text || *end != '\0' || errno == ERANGE || v < min) {
        cli_usage_error("%s: '%s' is not a whole number >= %ld", opt, text ? text : "", min);
        return -1;
    }
    *out = v;
    return 0;
}

const char *cli_db_path(const char *option_value)
{
    if (option_value && *option_value)
        return option_value;
    const char *env = getenv("SPLITLOT_DB");
    return (env && *env) ? env : "splitlot.db";
}

int cli_print_help(const char *text)
{
    fputs(text, stdout);
    return CLI_EXIT_OK;
}

int cli_bad_option(const char *command, const char *arg)
{
    return cli_usage_error("%s: unknown option or missing value near '%s' (see 'splitlot %s --help')",
                           command, arg ? arg : "", command);
}

void cli_reset_getopt(void)
{
    optind = 0; /* glibc: 0 re-initialises the scanner completely */
    opterr = 0;
}

int cli_split_treatment_names(const sl_plan *plan, size_t split, const char **names, size_t max)
{
    const sl_plan_split *s = &plan->splits[split];
    size_t n = s->n_treatments < max ? s->n_treatments : max;
    for (size_t i = 0; i < n; i++)
        names[i] = plan->treatments[s->treatments[i]].name;
    return (int)n;
}

int cli_require_db(const char *path)
{
    if (sl_store_is_server(path) || access(path, F_OK) == 0)
        return 0; /* a server's database is checked by connecting to it */
    cli_usage_error("database '%s' does not exist; run 'splitlot predict PLAN' first "
                    "(or give --db / SPLITLOT_DB)", path);
    return -1;
}
