/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_check.c: `etacal check`: validate promises, intervals and quantile
 * forecasts against actuals, overall and per segment, and gate a release
 * on the result.  The options become an etacal_check_opts; the library
 * checks (etacal_check_run) and writes the result (etacal_check_write). */
#include "cli.h"

#include <getopt.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define MAX_KEYS 16
#define MAX_Q 32
#define MAX_COLS (2 + MAX_Q + 1 + MAX_KEYS)

enum { EXIT_GATE = 3 };

static const char help[] =
    "Usage: etacal check DATA.csv --actual COL [--upper COL[=LEVEL]] [--lower COL[=LEVEL]]\n"
    "                    [--quantile COL=TAU]... [OPTION]...\n"
    "       etacal check DATA.csv --actual COL --upper COL=LEVEL --table QUOTES.csv [OPTION]...\n"
    "Check whether promises, intervals or quantile forecasts cover what they claim:\n"
    "coverage with a binomial confidence interval, pinball loss, interval score,\n"
    "slack and lateness, overall and per segment.\n"
    "\n"
    "  --actual COL          actual durations, seconds (required)\n"
    "  --upper COL[=LEVEL]   an upper bound: alone, a one-sided promise whose nominal\n"
    "                        on-time rate is LEVEL; with --lower, the interval's upper end\n"
    "  --lower COL[=LEVEL]   the lower end of a two-sided interval.  Its nominal coverage\n"
    "                        is the upper LEVEL minus the lower one when both are given,\n"
    "                        else the one LEVEL given\n"
    "  --quantile COL=TAU    a quantile forecast at level TAU; repeatable (up to 32): several\n"
    "                        are also checked as a whole (calibration table, crossing)\n"
    "  --by COL[,COL...]     also check each segment (combination of these columns)\n"
    "  --confidence C        of the binomial intervals (default 0.95)\n"
    "  --ci wilson|exact     Wilson score interval (default) or Clopper-Pearson\n"
    "  --min-rows N          segments with fewer rows are marked thin and not gated (default 30)\n"
    "  --format text|csv|json  output format (default text)\n"
    "  -o, --output FILE     write to FILE, which appears only when complete (default stdout)\n"
    "  --gate                exit 3 when the gate fails: each figure (overall, and each\n"
    "                        segment that is not thin) is tested one-sided against its\n"
    "                        nominal level (binomial), with Holm's correction across them;\n"
    "                        this does not allow for the calibration noise of a fitted table\n"
    "  --table QUOTES.csv    the quote table whose promises --upper COL=LEVEL holds (LEVEL one\n"
    "                        of its targets): orders are grouped by the table row that served\n"
    "                        them (as etacal apply looks it up) and each row's hits are tested\n"
    "                        against the exact law of its bound, Beta-binomial(m, k, n+1-k)\n"
    "                        with the row's n and k; not with --by, --lower or --quantile\n"
    "  --gate-level D        family-wise error of the gate: an honest forecast (or table,\n"
    "                        with --table) fails it with probability at most D\n"
    "                        (default 1 - the --confidence, so 0.05)\n"
    "  --delim D             comma (default), semicolon, tab or pipe\n"
    "  --bad-rows error|skip malformed data rows are an error (default) or skipped and counted\n"
    "  --max-bad-share F     with --bad-rows skip: fail above this share (default 0.01)\n"
    "  --threads 1|auto      as for etacal fit\n"
    "  -h, --help            show this help and exit\n"
    "\n"
    "Rows with a missing actual or forecast are left out and counted.\n"
    "Exit status: 0 done (and gate passed), 1 data error, 2 usage error, 3 gate failed.\n";

typedef struct colset {
    etacal_colspec spec[MAX_COLS];
    size_t n;
} colset;

/* Index of a column in the read list, adding it when new. */
static size_t add_col(colset *cs, const char *name, int type, unsigned flags, const char *what)
{
    for (size_t i = 0; i < cs->n; i++)
        if (strcmp(cs->spec[i].name, name) == 0) {
            if (cs->spec[i].type == ETACAL_COL_NUM && type == ETACAL_COL_NUM)
                cs->spec[i].flags |= flags;
            return i;
        }
    cs->spec[cs->n] = (etacal_colspec){name, type, flags, what};
    return cs->n++;
}

/* "COL=LEVEL" or "COL": splits at the last '='. */
static int split_level(char *arg, double *level, int required)
{
    char *eq = strrchr(arg, '=');
    *level = NAN;
    if (!eq)
        return required ? -1 : 0;
    *eq = '\0';
    if (!*arg || etacal_num_parse(eq + 1, strlen(eq + 1), level) != ETACAL_NUM_VALUE || !(*level > 0 && *level < 1))
        return -1;
    return 0;
}

/* The command line, and the library's options built from it. */
typedef struct check_args {
    const char *actual, *output, *format, *table_path, *path;
    double glevel;
    char *upper, *lower;
    char *qargs[MAX_Q];
    size_t nq, nkeys;
    char *keys[MAX_KEYS];
    int gate;
    etacal_check_opts co;
    etacal_read_opts ro;
    colset cs;
    size_t qcols[MAX_Q], key_cols[MAX_KEYS], tkey_cols[MAX_KEYS];
    double qtaus[MAX_Q];
} check_args;

enum { O_ACTUAL = 256, O_UPPER, O_LOWER, O_QUANT, O_BY, O_CONF, O_CI, O_MINROWS, O_FORMAT, O_GATE, O_TABLE,
       O_GLEVEL };

/* One option with a value of its own: 0, or the exit status. */
static int check_option(int c, check_args *a)
{
    etacal_check_opts *co = &a->co;
    switch (c) {
    case O_QUANT:
        if (a->nq >= MAX_Q)
            return usage_error("check", "at most %d --quantile columns", MAX_Q);
        a->qargs[a->nq++] = optarg;
        return 0;
    case O_BY:
        a->nkeys = 0;
        if (parse_names(optarg, a->keys, &a->nkeys, MAX_KEYS) != 0)
            return usage_error("check", "--by takes up to %d comma-separated column names", MAX_KEYS);
        return 0;
    case O_CONF:
        if (parse_share(optarg, &co->confidence) != 0 || !(co->confidence > 0 && co->confidence < 1))
            return usage_error("check", "--confidence takes a level in (0,1), such as 0.95");
        return 0;
    case O_CI:
        if (strcmp(optarg, "wilson") == 0)
            co->ci = ETACAL_CI_WILSON;
        else if (strcmp(optarg, "exact") == 0)
            co->ci = ETACAL_CI_EXACT;
        else
            return usage_error("check", "--ci must be wilson or exact");
        return 0;
    case O_MINROWS:
        if (parse_size(optarg, &co->min_rows) != 0 || co->min_rows == 0)
            return usage_error("check", "--min-rows takes a whole number >= 1");
        return 0;
    case O_FORMAT: return parse_format(optarg, "check", &a->format) != 0 ? EXIT_USAGE : 0;
    case O_GLEVEL:
        if (parse_share(optarg, &a->glevel) != 0 || !(a->glevel > 0 && a->glevel < 1))
            return usage_error("check", "--gate-level takes a family-wise error level in (0,1), such as 0.05");
        return 0;
    default: return 0;
    }
}

/* Parses the command line into a: -1 to go on, else the exit status. */
static int parse_options(int argc, char **argv, check_args *a)
{
    static const struct option longopts[] = {
        {"actual", required_argument, 0, O_ACTUAL},   {"upper", required_argument, 0, O_UPPER},
        {"lower", required_argument, 0, O_LOWER},     {"quantile", required_argument, 0, O_QUANT},
        {"by", required_argument, 0, O_BY},           {"confidence", required_argument, 0, O_CONF},
        {"ci", required_argument, 0, O_CI},           {"min-rows", required_argument, 0, O_MINROWS},
        {"format", required_argument, 0, O_FORMAT},   {"gate", no_argument, 0, O_GATE},
        {"table", required_argument, 0, O_TABLE},     {"gate-level", required_argument, 0, O_GLEVEL},
        {"output", required_argument, 0, 'o'},        READ_OPTIONS, {"help", no_argument, 0, 'h'},
        {0, 0, 0, 0}};
    int c, r;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_ACTUAL: a->actual = optarg; break;
        case O_UPPER: a->upper = optarg; break;
        case O_LOWER: a->lower = optarg; break;
        case O_GATE: a->gate = 1; break;
        case O_TABLE: a->table_path = optarg; break;
        case 'o': a->output = optarg; break;
        case 'h': fputs(help, stdout); return 0;
        case O_QUANT: case O_BY: case O_CONF: case O_CI: case O_MINROWS: case O_FORMAT: case O_GLEVEL:
            if ((r = check_option(c, a)) != 0)
                return r;
            break;
        default:
            if ((r = other_option(c, "check", &a->ro, argv)) != 0)
                return r;
            break;
        }
    }
    if ((r = one_input(argc, argv, "check", "data file")) != 0)
        return r;
    a->path = argv[optind];
    const char *inputs[2] = {a->path, a->table_path};
    if ((r = cli_check_output("check", a->output, inputs, 2)) != 0)
        return r;
    if (!a->actual)
        return usage_error("check", "--actual is required");
    if (!a->upper && a->nq == 0)
        return usage_error("check", "nothing to check: give --upper or --quantile");
    if (a->lower && !a->upper)
        return usage_error("check", "--lower needs --upper (a two-sided interval)");
    if (a->table_path) {
        if (!a->upper || !strrchr(a->upper, '='))
            return usage_error("check", "--table needs --upper COL=LEVEL, LEVEL one of the table's targets");
        if (a->lower || a->nq)
            return usage_error("check", "--table checks one-sided promises: not with --lower or --quantile");
        if (a->nkeys)
            return usage_error("check", "--table groups the orders by the table row that served them: not with --by");
    }
    /* The gate's family-wise error follows the confidence of the intervals
     * unless given. */
    a->co.gate_level = isnan(a->glevel) ? 1 - a->co.confidence : a->glevel;
    return -1;
}

/* The forecast columns to read: -1 to go on, else the exit status. */
static int forecast_columns(check_args *a)
{
    etacal_check_opts *co = &a->co;
    unsigned fflags = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE;
    co->actual_col = add_col(&a->cs, a->actual, ETACAL_COL_NUM, fflags | ETACAL_NUM_NONNEG, "duration");
    if (a->upper) {
        if (split_level(a->upper, &co->upper_level, 0) != 0)
            return usage_error("check", "--upper takes COL or COL=LEVEL with LEVEL in (0,1)");
        co->upper_col = (long)add_col(&a->cs, a->upper, ETACAL_COL_NUM, fflags, "bound");
    }
    if (a->lower) {
        if (split_level(a->lower, &co->lower_level, 0) != 0)
            return usage_error("check", "--lower takes COL or COL=LEVEL with LEVEL in (0,1)");
        co->lower_col = (long)add_col(&a->cs, a->lower, ETACAL_COL_NUM, fflags, "bound");
    }
    if (a->upper && a->lower && !isnan(co->upper_level) && !isnan(co->lower_level) &&
        !(co->upper_level > co->lower_level))
        return usage_error("check", "the upper LEVEL must be above the lower LEVEL");
    for (size_t i = 0; i < a->nq; i++) {
        if (split_level(a->qargs[i], &a->qtaus[i], 1) != 0)
            return usage_error("check", "--quantile takes COL=TAU with TAU in (0,1)");
        for (size_t j = 0; j < i; j++)
            if (a->qtaus[j] == a->qtaus[i])
                return usage_error("check", "two --quantile columns at the same level %g", a->qtaus[i]);
        a->qcols[i] = add_col(&a->cs, a->qargs[i], ETACAL_COL_NUM, fflags, "quantile");
    }
    co->q_cols = a->qcols;
    co->q_taus = a->qtaus;
    co->nq = a->nq;
    /* a gate tests figures against their nominal level: a bound without one
     * gives the gate nothing to test */
    if (a->gate && a->upper && isnan(co->upper_level))
        return usage_error("check", "--gate has no level to test '%s' against: give it, such as --upper %s=0.9",
                           a->upper, a->upper);
    if (a->gate && a->lower && isnan(co->lower_level))
        return usage_error("check", "--gate has no level to test '%s' against: give it, such as --lower %s=0.1",
                           a->lower, a->lower);
    return -1;
}

/* Reads the quote table of --table, whose key columns are read from the
 * data: -1 to go on with *qt set, else the exit status. */
static int quote_table(check_args *a, etacal_quotes **qt)
{
    etacal_error err;
    etacal_error_clear(&err);
    if (etacal_quotes_read_csv(cli_input(a->table_path), ',', qt, &err) != 0)
        return report_error(&err);
    const etacal_quotes *q = *qt;
    if (etacal_quotes_find_target(q, a->co.upper_level) < 0) {
        char list[256];
        size_t w = 0;
        list[0] = '\0';
        for (size_t i = 0; i < etacal_quotes_ntargets(q) && w + ETACAL_NUM_BUFSZ + 2 < sizeof list; i++) {
            char num[ETACAL_NUM_BUFSZ];
            etacal_num_format(etacal_quotes_target(q, i), num);
            w += (size_t)snprintf(list + w, sizeof list - w, "%s%s", i ? ", " : "", num);
        }
        return usage_error("check", "--upper level %g is not a target of the table %s (its targets: %s)",
                           a->co.upper_level, a->table_path, list);
    }
    size_t nk = etacal_quotes_nkeys(q);
    if (nk > MAX_KEYS)
        return usage_error("check", "the table has more than %d key columns", MAX_KEYS);
    for (size_t j = 0; j < nk; j++)
        for (size_t i = 0; i < a->cs.n; i++)
            if (strcmp(a->cs.spec[i].name, etacal_quotes_key_name(q, j)) == 0)
                return usage_error("check", "the table's key column '%s' is also a numeric column here",
                                   etacal_quotes_key_name(q, j));
    for (size_t j = 0; j < nk; j++)
        a->tkey_cols[j] = add_col(&a->cs, etacal_quotes_key_name(q, j), ETACAL_COL_KEY, 0, NULL);
    a->co.table = q;
    a->co.table_key_cols = a->tkey_cols;
    a->co.table_source = a->table_path;
    return -1;
}

/* The --by columns: -1 to go on, else the exit status. */
static int key_columns(check_args *a)
{
    for (size_t j = 0; j < a->nkeys; j++) {
        for (size_t i = 0; i < a->cs.n; i++)
            if (strcmp(a->cs.spec[i].name, a->keys[j]) == 0)
                return usage_error("check", "'%s' cannot be both a key and a numeric column", a->keys[j]);
        for (size_t i = 0; i < j; i++)
            if (strcmp(a->keys[i], a->keys[j]) == 0)
                return usage_error("check", "--by names '%s' twice", a->keys[j]);
    }
    for (size_t j = 0; j < a->nkeys; j++)
        a->key_cols[j] = add_col(&a->cs, a->keys[j], ETACAL_COL_KEY, 0, NULL);
    a->co.key_cols = a->key_cols;
    a->co.nkeys = a->nkeys;
    return -1;
}

static int format_code(const char *f)
{
    return strcmp(f, "json") == 0 ? ETACAL_FORMAT_JSON : strcmp(f, "csv") == 0 ? ETACAL_FORMAT_CSV : ETACAL_FORMAT_TEXT;
}

/* Reads the data, checks, writes: the exit status. */
static int run(check_args *a)
{
    progress pg = {a->path, 0, -1};
    a->ro.progress = progress_cb;
    a->ro.progress_ud = &pg;
    etacal_error err;
    etacal_error_clear(&err);
    etacal_table *t = NULL;
    etacal_check_result *r = NULL;
    cliout of = {0};
    int rc = etacal_table_read_csv(cli_input(a->path), a->cs.spec, a->cs.n, &a->ro, &t, &err);
    progress_end(&pg);
    if (rc == 0)
        rc = etacal_check_run(t, &a->co, &r, &err);
    if (rc == 0)
        rc = cliout_open(&of, a->output, &err);
    if (rc == 0) {
        etacal_check_write_opts wo = {a->path, t, a->table_path, a->gate};
        rc = etacal_check_write(r, &wo, format_code(a->format), &of.sink, &err);
        if (rc == 0)
            rc = cliout_commit(&of, &err);
        cliout_close(&of);
    }
    int status = rc ? report_error(&err) : a->gate && r->gate_failed ? EXIT_GATE : 0;
    etacal_check_destroy(r);
    etacal_table_destroy(t);
    return status;
}

int cmd_check(int argc, char **argv)
{
    check_args a = {.format = "text", .glevel = NAN};
    a.co.upper_col = a.co.lower_col = -1;
    a.co.upper_level = a.co.lower_level = NAN;
    a.co.confidence = 0.95;
    a.co.ci = ETACAL_CI_WILSON;
    a.co.min_rows = 30;
    a.ro = (etacal_read_opts){
        .delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01, .threads = ETACAL_THREADS_AUTO};
    int rc = parse_options(argc, argv, &a);
    if (rc < 0)
        rc = forecast_columns(&a);
    etacal_quotes *qt = NULL;
    if (rc < 0 && a.table_path)
        rc = quote_table(&a, &qt);
    if (rc < 0)
        rc = key_columns(&a);
    if (rc < 0)
        rc = run(&a);
    etacal_quotes_destroy(qt);
    return rc;
}
