/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_publish.c: `etacal publish`: the nightly job's command.  The options
 * become a publish specification; the library (etacal_publish_run) fits,
 * compares, evaluates the guards and replaces the table; this file prints
 * its result as the change report (text or JSON) on stdout, a refusal's
 * lines on stderr, and maps the outcome to the exit status. */
#include "fitargs.h"

#include <jansson.h>
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

/* What the change report shows: the options and the library's result. */
typedef struct report_view {
    const publish_opts *po;
    const fit_args *a;
    const char *path;
    const etacal_publish_result *res;
    const etacal_quotes *q, *cur;   /* the new table; the current one compared, or NULL */
    const etacal_quotes_diff *d;    /* the comparison, or NULL */
    const etacal_read_stats *rs;
    size_t used;
    const etacal_guard *g;
    size_t ng;
    double ref_pred;
    const double *ref_x;
} report_view;

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

static void keys_label(char *buf, size_t n, const etacal_quotes *q, const char *const *keys)
{
    if (q->nkeys == 0) {
        snprintf(buf, n, "global");
        return;
    }
    size_t w = (size_t)snprintf(buf, n, "(");
    for (size_t j = 0; j < q->nkeys && w < n; j++)
        w += (size_t)snprintf(buf + w, n - w, "%s%s", j ? ", " : "", keys[j]);
    if (w < n)
        snprintf(buf + w, n - w, ")");
}

/* "new table: method add, 21 rows, targets 0.8, 0.9" */
static void print_table_line(const char *what, const etacal_quotes *q)
{
    printf("%s: method %s, %zu row%s, target%s", what, etacal_method_name(q->method), q->nrows,
           q->nrows == 1 ? "" : "s", q->ntargets == 1 ? "" : "s");
    for (size_t t = 0; t < q->ntargets; t++)
        printf("%s%g", t ? ", " : " ", q->targets[t]);
    putchar('\n');
}

static double move_of(const etacal_quote_move *m) { return m->new_promise - m->old_promise; }

static json_t *keys_json(const etacal_quotes *q, const char *const *keys)
{
    json_t *o = json_object();
    for (size_t j = 0; j < q->nkeys; j++)
        json_object_set_new(o, q->key_names[j], json_string(keys[j]));
    return o;
}

static json_t *num_or_null(double v) { return isfinite(v) ? json_real(v) : json_null(); }

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

static const char *outcome_name(int outcome)
{
    return outcome == ETACAL_PUBLISH_REFUSED ? "refused" : outcome == ETACAL_PUBLISH_DRY_RUN ? "dry run" : "published";
}

/* The change report as JSON: 0, or -1 when it could not be written whole. */
static int print_json(const report_view *v)
{
    json_t *root = json_object();
    json_object_set_new(root, "etacal", json_string(ETACAL_VERSION));
    json_object_set_new(root, "table", json_string(v->po->table));
    json_object_set_new(root, "input", json_string(v->path));
    json_object_set_new(root, "outcome", json_string(outcome_name(etacal_publish_result_outcome(v->res))));
    json_t *rows = json_object();
    json_object_set_new(rows, "read", json_integer((json_int_t)v->rs->data_rows));
    json_object_set_new(rows, "used", json_integer((json_int_t)v->used));
    json_object_set_new(rows, "missing", json_integer((json_int_t)v->rs->missing));
    json_object_set_new(rows, "skipped_bad", json_integer((json_int_t)v->rs->bad));
    json_object_set_new(root, "rows", rows);
    json_t *ref = json_object();
    json_object_set_new(ref, "pred_s", json_real(v->ref_pred));
    for (size_t j = 0; j < v->a->nx; j++)
        json_object_set_new(ref, v->a->xs[j], json_real(v->ref_x[j]));
    json_object_set_new(root, "reference", ref);
    json_t *segs = json_null();
    if (v->d) {
        segs = json_object();
        json_object_set_new(segs, "added", json_integer((json_int_t)v->d->segs_added));
        json_object_set_new(segs, "removed", json_integer((json_int_t)v->d->segs_removed));
        json_object_set_new(segs, "changed", json_integer((json_int_t)v->d->segs_changed));
        json_object_set_new(segs, "unchanged", json_integer((json_int_t)v->d->segs_same));
    }
    json_object_set_new(root, "segments", segs);
    json_t *mv = json_array();
    for (size_t i = 0; v->d && i < v->d->nmoves; i++) {
        const etacal_quote_move *m = &v->d->moves[i];
        json_t *o = json_object();
        /* the keys of the table the move's row comes from */
        json_object_set_new(o, "keys", keys_json(m->in_new ? v->q : v->cur, m->keys));
        json_object_set_new(o, "target", json_real(m->target));
        json_object_set_new(o, "in_current", json_boolean(m->in_old));
        json_object_set_new(o, "in_new", json_boolean(m->in_new));
        json_object_set_new(o, "current_s", num_or_null(m->old_promise));
        json_object_set_new(o, "new_s", num_or_null(m->new_promise));
        json_object_set_new(o, "move_s", num_or_null(move_of(m)));
        json_array_append_new(mv, o);
    }
    json_object_set_new(root, "moves", mv);
    json_t *gr = json_array();
    for (size_t i = 0; i < v->ng; i++) {
        json_t *o = json_object();
        json_object_set_new(o, "guard", json_string(v->g[i].name));
        json_object_set_new(o, "result", json_string(etacal_guard_status_name(v->g[i].status)));
        json_object_set_new(o, "detail", json_string(v->g[i].message));
        json_array_append_new(gr, o);
    }
    json_object_set_new(root, "guards", gr);
    etacal_error je;
    int bad = json_out(root, stdout, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10), "stdout", &je);
    json_decref(root);
    return bad ? -1 : 0;
}

/* The largest moves at the reference order, at most --show of them. */
static int print_moves(const report_view *v)
{
    const etacal_quotes *q = v->q;
    const etacal_quotes_diff *d = v->d;
    size_t shown = 0;
    for (size_t i = 0; i < d->nmoves; i++)
        shown += isfinite(move_of(&d->moves[i])) && move_of(&d->moves[i]) != 0;
    if (!shown || !v->po->show)
        return 0;
    printf("\nlargest moves of the promise at the reference order:\n");
    size_t nk = q->nkeys ? q->nkeys : 1;
    text_table tt;
    if (tt_init(&tt, nk + 4) != 0)
        return -1;
    const char *cells[FIT_MAX_KEYS + 4];
    char b[4][48];
    size_t k = 0;
    for (size_t j = 0; j < q->nkeys; j++)
        cells[k++] = q->key_names[j];
    if (!q->nkeys)
        cells[k++] = "segment";
    cells[k++] = "target";
    cells[k++] = "current s";
    cells[k++] = "new s";
    cells[k++] = "move s";
    tt_add(&tt, cells);
    for (size_t j = nk; j < nk + 4; j++)
        tt.right[j] = 1;
    size_t listed = 0;
    for (size_t i = 0; i < d->nmoves && listed < v->po->show; i++) {
        const etacal_quote_move *m = &d->moves[i];
        double mvv = move_of(m);
        if (!isfinite(mvv) || mvv == 0)
            continue;
        k = 0;
        for (size_t j = 0; j < q->nkeys; j++)
            cells[k++] = d->keys_differ ? "*" : m->keys[j];
        if (!q->nkeys)
            cells[k++] = "*";
        snprintf(b[0], sizeof b[0], "%g", m->target);
        snprintf(b[1], sizeof b[1], "%.1f", m->old_promise);
        snprintf(b[2], sizeof b[2], "%.1f", m->new_promise);
        snprintf(b[3], sizeof b[3], "%+.1f", mvv);
        for (int j = 0; j < 4; j++)
            cells[k++] = b[j];
        tt_add(&tt, cells);
        listed++;
    }
    int rc = tt_print(&tt, stdout);
    tt_free(&tt);
    return rc;
}

/* The comparison with the current table (there is one). */
static int print_comparison(const report_view *v)
{
    const etacal_quotes_diff *d = v->d;
    print_table_line("current table", v->cur);
    printf("reference order: prediction %.1f s", v->ref_pred);
    for (size_t j = 0; j < v->a->nx; j++)
        printf(", %s %g", v->a->xs[j], v->ref_x[j]);
    printf(" (%s)\n", v->po->have_ref ? "--ref-pred" : "medians of the data");
    printf("segments: %zu added, %zu removed, %zu changed, %zu unchanged; %zu promises compared\n", d->segs_added,
           d->segs_removed, d->segs_changed, d->segs_same, etacal_publish_result_compared(v->res));
    int rc = print_moves(v);
    int head = 0;
    for (size_t i = 0; i < d->nmoves; i++) {
        const etacal_quote_move *m = &d->moves[i];
        if (m->in_old == m->in_new)
            continue;
        if (!head++)
            printf("\nsegments with a row in one table only:\n");
        char who[160];
        keys_label(who, sizeof who, m->in_new ? v->q : v->cur, m->keys);
        printf("  %s %s at target %g\n", m->in_new ? "added  " : "removed", who, m->target);
    }
    return rc;
}

/* The change report as text: 0, or -1 when a table of it ran out of memory. */
static int print_text(const report_view *v)
{
    const publish_opts *po = v->po;
    int bad = 0;
    printf("etacal publish: %s from %s\n", po->table, v->path);
    printf("rows: %zu read, %zu used, %zu left out (missing actual or prediction), %zu malformed skipped\n",
           v->rs->data_rows, v->used, v->rs->missing, v->rs->bad);
    print_table_line("new table", v->q);
    if (v->d)
        bad |= print_comparison(v) != 0;
    else
        printf("current table: %s\n", etacal_publish_result_current_problem(v->res)[0] ? "not valid" : "none");
    printf("\nguards:\n");
    text_table tt;
    if (tt_init(&tt, 3) != 0) {
        bad = 1;
    } else {
        for (size_t i = 0; i < v->ng; i++) {
            int st = v->g[i].status;
            const char *cells[3] = {v->g[i].name,
                                    st == ETACAL_GUARD_PASSED ? "ok" : st == ETACAL_GUARD_FAILED ? "FAILED" : "-",
                                    v->g[i].message};
            tt_add(&tt, cells);
        }
        bad |= tt_print(&tt, stdout) != 0;
        tt_free(&tt);
    }
    putchar('\n');
    int outcome = etacal_publish_result_outcome(v->res);
    if (outcome == ETACAL_PUBLISH_REFUSED) {
        printf("refused: nothing replaced; %s is left as it was\n", po->table);
    } else if (outcome == ETACAL_PUBLISH_DRY_RUN) {
        printf("dry run: every guard holds; %s is unchanged\n", po->table);
    } else {
        const char *prev = etacal_publish_result_prev_path(v->res);
        const char *meta = etacal_publish_result_record_path(v->res);
        const char *hist = etacal_publish_result_history_path(v->res);
        printf("published: %s", po->table);
        if (prev[0])
            printf(" (the previous table kept as %s)", prev);
        if (meta[0])
            printf("; provenance in %s", meta);
        if (hist[0])
            printf("; history copy %s", hist);
        putchar('\n');
    }
    return bad ? -1 : 0;
}

/* The report, the refusal's lines and the exit status (status: 0, or 1
 * after an error that followed the replacement). */
static int report(const report_view *v, int status)
{
    int bad = 0;
    if (!v->po->quiet)
        bad = strcmp(v->po->format, "json") == 0 ? print_json(v) : print_text(v);
    fflush(stdout); /* the report before the lines on stderr */
    int refused = etacal_publish_result_outcome(v->res) == ETACAL_PUBLISH_REFUSED;
    if (bad) {
        fprintf(stderr, "etacal: publish: out of memory: the change report is incomplete%s\n",
                etacal_publish_result_outcome(v->res) != ETACAL_PUBLISHED ? "; nothing replaced"
                                                                          : "; the table is published");
        status = EXIT_DATA;
    }
    if (refused) {
        for (size_t i = 0; i < v->ng; i++)
            if (v->g[i].status == ETACAL_GUARD_FAILED)
                fprintf(stderr, "etacal: publish: refused by the %s guard: %s\n", v->g[i].name, v->g[i].message);
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
    const etacal_fit_run *fit = etacal_publish_result_fit(res);
    const etacal_table *t = etacal_fit_run_rows(fit);
    report_view v = {.po = &po, .a = &a, .path = path, .res = res};
    v.q = etacal_fit_run_quotes(fit);
    v.cur = etacal_publish_result_current(res);
    v.d = etacal_publish_result_diff(res);
    v.rs = etacal_table_stats(t);
    v.used = etacal_table_rows(t);
    v.g = etacal_publish_result_guards(res, &v.ng);
    v.ref_pred = etacal_publish_result_reference(res, &v.ref_x);
    status = report(&v, status);
    etacal_publish_result_destroy(res);
    return status;
}
