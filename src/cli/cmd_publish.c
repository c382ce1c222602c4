/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_publish.c: `etacal publish`: the nightly job's command.  The options
 * become a publish specification; the library (etacal_publish_run) fits,
 * compares, evaluates the guards and replaces the table, and writes the
 * change report (etacal_publish_write_report, text or JSON) that this file
 * sends to stdout; a refusal's lines go to stderr, and the outcome becomes
 * the exit status. */
#include "fitargs.h"
#include "outsink.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#define EXIT_REFUSED 3

static const char help[] =
    "Usage: etacal publish CAL.csv --table QUOTES.csv --actual COL --pred COL [OPTION]...\n"
    "Fit a new quote table as etacal fit does and replace QUOTES.csv with it only\n"
    "when every guard holds.  The replacement is atomic and durable, under a lock\n"
    "(QUOTES.csv.lock); the previous table is kept as QUOTES.csv.prev and a\n"
    "provenance record written to QUOTES.csv.meta.json.  A change report goes to\n"
    "standard output.\n"
    "\n"
    "  --table FILE          the quote table to replace (required)\n" FIT_OPTIONS_HELP
    "  --holdout F           fit on the other rows and measure the on-time rate on\n"
    "                        this share of them (the published table is that fit)\n"
    "  --time COL            timestamps: --holdout takes the latest rows, and the\n"
    "                        provenance record gives the data's time range\n"
    "  --half-life D, --confidence C   as for etacal fit\n"
    "\n"
    "Guards (each must hold, else nothing is replaced and the exit status is 3):\n"
    "  --max-change S        no segment's promise at the reference order moves by\n"
    "                        more than S seconds (or 12m, 1h)\n"
    "  --max-change-pct P    ... nor by more than P percent (default 25 when neither\n"
    "                        limit is given)\n"
    "  --ref-pred S          the reference order's prediction (default: the median\n"
    "                        prediction; covariates at their medians)\n"
    "  --min-total-rows N    at least N rows used in the fit (default 1000)\n"
    "  --max-bad-share F     at most this share of malformed rows skipped (default\n"
    "                        0.01); malformed rows are skipped unless --bad-rows error\n"
    "  --require-holdout     with --holdout: for every target, the Wilson 95% interval\n"
    "                        of the held-out on-time rate must not lie below it\n"
    "  --allow-layout-change accept other key columns, fewer targets or new\n"
    "                        covariates than the current table has\n"
    "  The new table must also read back as written, and the current table (when\n"
    "  there is one) must be a valid quote table.\n"
    "\n"
    "  --dry-run             check the guards and report, replace nothing\n"
    "  --history DIR         also keep a dated copy of each published table in DIR\n"
    "  --wait S              wait up to S seconds for another publisher's lock\n"
    "                        (default 60)\n"
    "  --show N              moves listed in the text report (default 10)\n"
    "  --format text|json    the change report's format (default text)\n"
    "  -q, --quiet           no change report (a refusal still gets its line on stderr)\n"
    "  --delim D, --bad-rows error|skip, --threads 1|auto   as for etacal fit\n"
    "  -h, --help            show this help and exit\n"
    "\n"
    "Exit status: 0 published (or the dry run passed), 3 refused by a guard (the\n"
    "table is left byte for byte as it was), 1 data or system error, 2 usage error.\n";


typedef struct publish_opts {
    const char *table, *history, *format;
    double max_change, max_change_pct, ref_pred, max_bad, wait_s;
    int have_change, have_pct, have_ref, require_holdout, allow_layout, dry_run, quiet;
    size_t min_total, show;
} publish_opts;

static double now_utc(void)
{
    /* SOURCE_DATE_EPOCH (reproducible-builds.org) fixes the clock for tests */
    const char *e = getenv("SOURCE_DATE_EPOCH");
    if (e && *e) {
        char *end;
        long long v = strtoll(e, &end, 10);
        if (!*end && v >= 0)
            return (double)v;
    }
    return (double)time(NULL);
}

enum { P_TABLE = 600, P_MAXCH, P_MAXPCT, P_REFPRED, P_MINTOTAL, P_REQHOLD, P_LAYOUT, P_DRY, P_HISTORY,
       P_WAIT, P_SHOW, P_FORMAT };
static const struct option longopts[] = {FIT_OPTIONS,
                                         {"table", required_argument, 0, P_TABLE},
                                         {"max-change", required_argument, 0, P_MAXCH},
                                         {"max-change-pct", required_argument, 0, P_MAXPCT},
                                         {"ref-pred", required_argument, 0, P_REFPRED},
                                         {"min-total-rows", required_argument, 0, P_MINTOTAL},
                                         {"require-holdout", no_argument, 0, P_REQHOLD},
                                         {"allow-layout-change", no_argument, 0, P_LAYOUT},
                                         {"dry-run", no_argument, 0, P_DRY},
                                         {"history", required_argument, 0, P_HISTORY},
                                         {"wait", required_argument, 0, P_WAIT},
                                         {"show", required_argument, 0, P_SHOW},
                                         {"format", required_argument, 0, P_FORMAT},
                                         {"quiet", no_argument, 0, 'q'},
                                         READ_OPTIONS,
                                         {"help", no_argument, 0, 'h'},
                                         {0, 0, 0, 0}};

static void free_argv(char **v, int n)
{
    for (int i = 0; i < n; i++)
        free(v[i]);
    free(v);
}

static int publish(int argc, char **argv, char **given);

int cmd_publish(int argc, char **argv)
{
    optind = 1;
    opterr = 0;
    /* the command line as given, for the provenance record (option parsing
     * reorders argv and splits --by's and --x's values in place) */
    int ngiven = argc + 1;
    char **given = calloc((size_t)ngiven, sizeof *given);
    if (!given) {
        fputs("etacal: out of memory\n", stderr);
        return EXIT_DATA;
    }
    for (int i = 0; i < ngiven; i++)
        if (!(given[i] = strdup(i ? argv[i - 1] : "etacal"))) {
            fputs("etacal: out of memory\n", stderr);
            free_argv(given, ngiven);
            return EXIT_DATA;
        }
    int status = publish(argc, argv, given);
    free_argv(given, ngiven);
    return status;
}

/* The options: -1 to go on, else the exit status (help, usage error). */
static int parse_options(int argc, char **argv, fit_args *a, publish_opts *po)
{
    int c;
    while ((c = getopt_long(argc, argv, ":qh", longopts, NULL)) != -1) {
        switch (c) {
        case 'q': po->quiet = 1; break;
        case P_TABLE: po->table = optarg; break;
        case P_MAXCH:
            if (parse_duration(optarg, &po->max_change) != 0)
                return usage_error("publish", "--max-change takes seconds (or a duration such as 10m)");
            po->have_change = 1;
            break;
        case P_MAXPCT:
            if (parse_seconds(optarg, &po->max_change_pct) != 0)
                return usage_error("publish", "--max-change-pct takes a percentage >= 0");
            po->have_pct = 1;
            break;
        case P_REFPRED:
            if (parse_seconds(optarg, &po->ref_pred) != 0)
                return usage_error("publish", "--ref-pred takes a prediction in seconds");
            po->have_ref = 1;
            break;
        case P_MINTOTAL:
            if (parse_size(optarg, &po->min_total) != 0)
                return usage_error("publish", "--min-total-rows takes a whole number");
            break;
        case P_REQHOLD: po->require_holdout = 1; break;
        case P_LAYOUT: po->allow_layout = 1; break;
        case P_DRY: po->dry_run = 1; break;
        case P_HISTORY: po->history = optarg; break;
        case P_WAIT:
            if (parse_seconds(optarg, &po->wait_s) != 0)
                return usage_error("publish", "--wait takes seconds >= 0");
            break;
        case P_SHOW:
            if (parse_size(optarg, &po->show) != 0)
                return usage_error("publish", "--show takes a whole number");
            break;
        case P_FORMAT:
            if (strcmp(optarg, "text") && strcmp(optarg, "json"))
                return usage_error("publish", "--format must be text or json");
            po->format = optarg;
            break;
        case 'h': fputs(help, stdout); return 0;
        case OPT_MAX_BAD:
            if (parse_share(optarg, &po->max_bad) != 0)
                return usage_error("publish", "--max-bad-share takes a share in [0,1]");
            break;
        default: {
            int r = fit_option(c, "publish", a);
            if (r < 0)
                r = other_option(c, "publish", &a->ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "publish", "calibration file");
    if (nin)
        return nin;
    if (!po->table)
        return usage_error("publish", "--table is required (the quote table to replace)");
    int u = fit_args_check(a, "publish");
    if (u)
        return u;
    if (strcmp(argv[optind], "-") == 0)
        return usage_error("publish", "CAL.csv must be a file, not standard input (its checksum is recorded)");
    if (strcmp(po->table, "-") == 0)
        return usage_error("publish", "--table must be a file");
    if (po->require_holdout && !(a->holdout > 0))
        return usage_error("publish", "--require-holdout needs --holdout F");
    return -1;
}

/* The library's specification from the options (arrays stay a's and
 * given's). */
static void make_spec(etacal_publishspec *ps, const fit_args *a, const publish_opts *po, const char *path,
                      char **given, int ngiven)
{
    etacal_publishspec_init(ps);
    fit_spec(a, &ps->fit);
    ps->input = path;
    ps->ro = a->ro;
    ps->table = po->table;
    ps->history = po->history;
    ps->min_total_rows = po->min_total;
    if (po->max_bad >= 0)
        ps->max_bad_share = po->max_bad;
    ps->max_change_s = po->have_change ? po->max_change : NAN;
    ps->max_change_pct = po->have_pct ? po->max_change_pct : NAN;
    ps->ref_pred = po->have_ref ? po->ref_pred : NAN;
    ps->allow_layout_change = po->allow_layout;
    ps->require_holdout = po->require_holdout;
    ps->dry_run = po->dry_run;
    ps->wait_s = po->wait_s;
    ps->now = now_utc();
    ps->command = (const char *const *)given;
    ps->ncommand = (size_t)ngiven;
}

/* The report, the refusal's lines and the exit status (status: 0, or 1
 * after an error that followed the replacement). */
static int report(const publish_opts *po, const etacal_publishspec *ps, const etacal_publish_result *res,
                  int status)
{
    int bad = 0;
    if (!po->quiet) {
        etacal_sink out = outsink(stdout);
        etacal_error e;
        int fmt = strcmp(po->format, "json") == 0 ? ETACAL_FORMAT_JSON : ETACAL_FORMAT_TEXT;
        bad = etacal_publish_write_report(res, ps, fmt, po->show, &out, &e) != 0;
    }
    fflush(stdout); /* the report before the lines on stderr */
    int outcome = etacal_publish_result_outcome(res);
    if (bad) {
        fprintf(stderr, "etacal: publish: out of memory: the change report is incomplete%s\n",
                outcome != ETACAL_PUBLISHED ? "; nothing replaced" : "; the table is published");
        status = EXIT_DATA;
    }
    if (outcome == ETACAL_PUBLISH_REFUSED) {
        size_t ng;
        const etacal_guard *g = etacal_publish_result_guards(res, &ng);
        for (size_t i = 0; i < ng; i++)
            if (g[i].status == ETACAL_GUARD_FAILED)
                fprintf(stderr, "etacal: publish: refused by the %s guard: %s\n", g[i].name, g[i].message);
        if (!bad)
            status = EXIT_REFUSED;
    }
    return status;
}

static int publish(int argc, char **argv, char **given)
{
    fit_args a;
    fit_args_init(&a);
    a.ro.bad_rows = ETACAL_BAD_ROWS_SKIP; /* the guard judges the share */
    publish_opts po = {.format = "text", .max_bad = -1, .wait_s = 60, .min_total = 1000, .show = 10};
    int st = parse_options(argc, argv, &a, &po);
    if (st >= 0)
        return st;
    const char *path = argv[optind];
    etacal_publishspec ps;
    make_spec(&ps, &a, &po, path, given, argc + 1);
    progress pg = {path, 0, -1};
    ps.ro.progress = progress_cb;
    ps.ro.progress_ud = &pg;

    etacal_error err;
    etacal_error_clear(&err);
    etacal_publish_result *res = NULL;
    int rc = etacal_publish_run(&ps, &res, &err);
    progress_end(&pg);
    if (rc && !res)
        return report_error(&err);
    int status = 0;
    if (rc) {
        /* the table itself is published: say what did not follow */
        if (!etacal_publish_result_record(res, NULL))
            fprintf(stderr, "etacal: publish: the table is published, but its provenance record is not: %s\n",
                    err.msg);
        else
            fprintf(stderr, "etacal: publish: the table is published, but: %s%s%s\n", err.where,
                    err.where[0] ? ": " : "", err.msg);
        status = EXIT_DATA;
    }
    status = report(&po, &ps, res, status);
    etacal_publish_result_destroy(res);
    return status;
}
