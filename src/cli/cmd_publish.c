/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_publish.c: `etacal publish`: the nightly job's command.  Fit a new
 * quote table as `etacal fit` does, compare it with the current table, and
 * replace that table only when every guard holds: atomically and durably,
 * under a lock, keeping the previous table, with a provenance record.  The
 * change report goes to stdout; a refusal also gets one line on stderr. */
#include "fitargs.h"

#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>

#define EXIT_REFUSED 3
#define MAX_GUARDS 8

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

typedef struct guard {
    const char *name;
    int ok;     /* 1 holds, 0 fails, -1 not checked */
    char detail[256];
} guard;

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

static int by_size_of_move(const void *pa, const void *pb)
{
    const etacal_quote_move *a = pa, *b = pb;
    double x = fabs(move_of(a)), y = fabs(move_of(b));
    int fa = isfinite(x), fb = isfinite(y);
    if (fa != fb)
        return fa ? -1 : 1;
    if (fa && x != y)
        return x > y ? -1 : 1;
    return 0;
}

/* The layout guard: what an `etacal apply` of the new table would need
 * that the current one did not. */
static int layout_problem(const etacal_quotes *o, const etacal_quotes *n, char *buf, size_t len)
{
    int same = o->nkeys == n->nkeys;
    for (size_t j = 0; same && j < o->nkeys; j++)
        same = strcmp(o->key_names[j], n->key_names[j]) == 0;
    if (!same) {
        snprintf(buf, len, "the key columns differ from the current table's");
        return 1;
    }
    for (size_t t = 0; t < o->ntargets; t++) {
        if (etacal_quotes_find_target(n, o->targets[t]) < 0) {
            snprintf(buf, len, "the current table's target %g is missing", o->targets[t]);
            return 1;
        }
    }
    for (size_t j = 0; j < n->ncoef; j++) {
        size_t i = 0;
        while (i < o->ncoef && strcmp(o->coef_names[i], n->coef_names[j]) != 0)
            i++;
        if (i == o->ncoef) {
            snprintf(buf, len, "the covariate '%s' is new: orders files may lack it", n->coef_names[j]);
            return 1;
        }
    }
    return 0;
}

/* Compares the table that was written and read back with the one in memory. */
static int same_table(const etacal_quotes *a, const etacal_quotes *b)
{
    if (a->nrows != b->nrows || a->ntargets != b->ntargets || a->nkeys != b->nkeys || a->ncoef != b->ncoef ||
        a->method != b->method)
        return 0;
    for (size_t r = 0; r < a->nrows; r++) {
        const etacal_quote *x = &a->rows[r], *y = &b->rows[r];
        if (x->offset_s != y->offset_s || x->slope != y->slope || x->n != y->n || x->k != y->k ||
            a->targets[x->target] != b->targets[y->target])
            return 0;
        if (!isfinite(x->offset_s) || !isfinite(x->slope))
            return 0;
        for (size_t j = 0; j < a->ncoef; j++)
            if (x->coef[j] != y->coef[j] || !isfinite(x->coef[j]))
                return 0;
        if (a->ncoef && !x->x_min != !y->x_min)
            return 0;
        for (size_t j = 0; j < a->ncoef && x->x_min; j++)
            if (x->x_min[j] != y->x_min[j] || x->x_max[j] != y->x_max[j])
                return 0;
        for (size_t j = 0; j < a->nkeys; j++)
            if (strcmp(a->segs[x->seg].keys[j], b->segs[y->seg].keys[j]) != 0)
                return 0;
    }
    return 1;
}

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
     * splits --by's and --x's values in place) */
    char **given = malloc((size_t)argc * sizeof *given);
    if (!given) {
        fputs("etacal: out of memory\n", stderr);
        return EXIT_DATA;
    }
    for (int i = 0; i < argc; i++)
        given[i] = NULL;
    for (int i = 0; i < argc; i++)
        if (!(given[i] = strdup(argv[i]))) {
            fputs("etacal: out of memory\n", stderr);
            free_argv(given, argc);
            return EXIT_DATA;
        }
    int status = publish(argc, argv, given);
    free_argv(given, argc);
    return status;
}

static int publish(int argc, char **argv, char **given)
{
    fit_args a;
    fit_args_init(&a);
    a.ro.bad_rows = ETACAL_BAD_ROWS_SKIP; /* the guard judges the share */
    publish_opts po = {.format = "text", .max_bad = -1, .wait_s = 60, .min_total = 1000, .show = 10};
    int c;
    while ((c = getopt_long(argc, argv, ":qh", longopts, NULL)) != -1) {
        switch (c) {
        case 'q': po.quiet = 1; break;
        case P_TABLE: po.table = optarg; break;
        case P_MAXCH:
            if (parse_duration(optarg, &po.max_change) != 0)
                return usage_error("publish", "--max-change takes seconds (or a duration such as 10m)");
            po.have_change = 1;
            break;
        case P_MAXPCT: {
            double v;
            if (parse_seconds(optarg, &v) != 0)
                return usage_error("publish", "--max-change-pct takes a percentage >= 0");
            po.max_change_pct = v;
            po.have_pct = 1;
            break;
        }
        case P_REFPRED:
            if (parse_seconds(optarg, &po.ref_pred) != 0)
                return usage_error("publish", "--ref-pred takes a prediction in seconds");
            po.have_ref = 1;
            break;
        case P_MINTOTAL:
            if (parse_size(optarg, &po.min_total) != 0)
                return usage_error("publish", "--min-total-rows takes a whole number");
            break;
        case P_REQHOLD: po.require_holdout = 1; break;
        case P_LAYOUT: po.allow_layout = 1; break;
        case P_DRY: po.dry_run = 1; break;
        case P_HISTORY: po.history = optarg; break;
        case P_WAIT:
            if (parse_seconds(optarg, &po.wait_s) != 0)
                return usage_error("publish", "--wait takes seconds >= 0");
            break;
        case P_SHOW:
            if (parse_size(optarg, &po.show) != 0)
                return usage_error("publish", "--show takes a whole number");
            break;
        case P_FORMAT:
            if (strcmp(optarg, "text") && strcmp(optarg, "json"))
                return usage_error("publish", "--format must be text or json");
            po.format = optarg;
            break;
        case 'h': fputs(help, stdout); return 0;
        case OPT_MAX_BAD:
            if (parse_share(optarg, &po.max_bad) != 0)
                return usage_error("publish", "--max-bad-share takes a share in [0,1]");
            break;
        default: {
            int r = fit_option(c, "publish", &a);
            if (r < 0)
                r = other_option(c, "publish", &a.ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "publish", "calibration file");
    if (nin)
        return nin;
    if (!po.table)
        return usage_error("publish", "--table is required (the quote table to replace)");
    int u = fit_args_check(&a, "publish");
    if (u)
        return u;
    const char *path = argv[optind];
    if (strcmp(path, "-") == 0)
        return usage_error("publish", "CAL.csv must be a file, not standard input (its checksum is recorded)");
    if (strcmp(po.table, "-") == 0)
        return usage_error("publish", "--table must be a file");
    if (po.require_holdout && !(a.holdout > 0))
        return usage_error("publish", "--require-holdout needs --holdout F");
    if (!po.have_change && !po.have_pct) {
        po.have_pct = 1;
        po.max_change_pct = 25;
    }
    if (po.max_bad < 0)
        po.max_bad = 0.01;
    a.ro.max_bad_share = 1; /* read everything; the guard decides */
    int json = strcmp(po.format, "json") == 0;

    etacal_error err;
    etacal_error_clear(&err);
    fit_result r = {0};
    etacal_quotes *cur = NULL;
    etacal_quotes *back = NULL;
    etacal_quotes_diff d = {0};
    etacal_outfile of = {0};
    char *buf = NULL;
    size_t buflen = 0;
    json_t *root = NULL;
    int lock = -1, rc;
    int status = 0;
    guard g[MAX_GUARDS];
    size_t ng = 0;
    char cur_problem[400] = "";
    int have_cur = 0;

    rc = etacal_lock_acquire(po.table, po.wait_s, &lock, &err);
    if (rc)
        return report_error(&err);
    (void)etacal_remove_stale_temps(po.table); /* a killed publisher's */
    rc = fit_run(&a, path, &r, &err);
    if (rc)
        goto fail;
    char in_sha[65];
    uint64_t in_bytes = 0;
    rc = etacal_sha256_file(path, in_sha, &in_bytes, &err);
    if (rc)
        goto fail;

    /* the current table */
    struct stat st;
    if (stat(po.table, &st) == 0) {
        etacal_error e2;
        etacal_error_clear(&e2);
        if (etacal_quotes_read_csv(po.table, ',', &cur, &e2) != 0) {
            if (e2.code == ETACAL_ENOMEM) {
                err = e2;
                rc = e2.code;
                goto fail;
            }
            snprintf(cur_problem, sizeof cur_problem, "%s%s%s", e2.where, e2.where[0] ? ": " : "", e2.msg);
        } else {
            have_cur = 1;
        }
    } else if (errno != ENOENT) {
        rc = etacal_error_set(&err, ETACAL_EIO, po.table, "cannot stat: %s", strerror(errno));
        goto fail;
    }

    /* the reference order */
    double ref_pred, ref_x[ETACAL_QR_MAX_COVARIATES];
    rc = etacal_reference_point(r.t, 1, r.x_cols, a.nx, &ref_pred, ref_x, &err);
    if (rc)
        goto fail;
    if (po.have_ref)
        ref_pred = po.ref_pred;
    if (have_cur) {
        rc = etacal_quotes_compare(cur, r.q, ref_pred, (const char *const *)a.xs, ref_x, a.nx, &d, &err);
        if (rc && rc != ETACAL_ENOMEM) {
            /* the current table has a covariate the new fit does not read */
            snprintf(cur_problem, sizeof cur_problem, "cannot compare: %s", err.msg);
            etacal_error_clear(&err);
            have_cur = 0;
            rc = 0;
            etacal_quotes_diff_free(&d);
        }
        if (rc)
            goto fail;
    }

    /* the new table, in memory first: its checksum goes in the record */
    FILE *ms = open_memstream(&buf, &buflen);
    if (!ms) {
        rc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
        goto fail;
    }
    rc = etacal_quotes_write_csv(r.q, ms, &err);
    /* glibc's fclose of a memory stream hides a failed last realloc, but
     * leaves the buffer as the last fflush set it: so that is checked */
    int ms_bad = fflush(ms) != 0 || ferror(ms);
    if ((fclose(ms) != 0 || ms_bad || !buf) && rc == 0)
        rc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
    if (rc)
        goto fail;
    etacal_sha256 sh;
    char tab_sha[65];
    etacal_sha256_init(&sh);
    etacal_sha256_update(&sh, buf, buflen);
    etacal_sha256_hex(&sh, tab_sha);
    rc = etacal_outfile_open(&of, po.table, &err);
    if (rc)
        goto fail;
    if (fwrite(buf, 1, buflen, of.fp) != buflen || fflush(of.fp) != 0) {
        rc = etacal_error_set(&err, ETACAL_EIO, po.table, "write failed: %s", strerror(errno));
        goto fail;
    }

    /* ---- the guards ---- */
    const etacal_read_stats *rs = etacal_table_stats(r.t);
    size_t used = etacal_table_rows(r.t);
    guard *gp = &g[ng++];
    *gp = (guard){"rows", used >= po.min_total, ""};
    snprintf(gp->detail, sizeof gp->detail, "%zu used, at least %zu wanted (--min-total-rows)", used, po.min_total);

    double bad_share = rs->data_rows ? (double)rs->bad / (double)rs->data_rows : 0;
    gp = &g[ng++];
    *gp = (guard){"bad rows", bad_share <= po.max_bad, ""};
    snprintf(gp->detail, sizeof gp->detail, "%zu of %zu skipped (%.2f%%), at most %.2f%% allowed (--max-bad-share)",
             rs->bad, rs->data_rows, 100 * bad_share, 100 * po.max_bad);

    gp = &g[ng++];
    *gp = (guard){"current table", 1, ""};
    if (cur_problem[0]) {
        gp->ok = 0;
        snprintf(gp->detail, sizeof gp->detail, "not valid (%.180s); fix it or move it aside", cur_problem);
    } else {
        snprintf(gp->detail, sizeof gp->detail, "%s", have_cur ? "valid" : "none yet: this is the first table");
    }

    const etacal_quote_move *worst = NULL;
    double worst_excess = 0;
    size_t compared = 0;
    for (size_t i = 0; i < d.nmoves; i++) {
        const etacal_quote_move *m = &d.moves[i];
        double mv = fabs(move_of(m));
        if (!isfinite(mv))
            continue;
        compared++;
        /* by how much the move exceeds the tighter limit (<= 0: within) */
        double ex = -INFINITY;
        if (po.have_change)
            ex = fmax(ex, (mv - po.max_change) / fmax(po.max_change, 1e-9));
        if (po.have_pct)
            ex = fmax(ex, m->old_promise > 0 ? (100 * mv / m->old_promise - po.max_change_pct) /
                                                   fmax(po.max_change_pct, 1e-9)
                                             : (mv > 0 ? INFINITY : -INFINITY));
        if (!worst || ex > worst_excess) {
            worst = m;
            worst_excess = ex;
        }
    }
    gp = &g[ng++];
    char lim[96] = "";
    if (po.have_change && po.have_pct)
        snprintf(lim, sizeof lim, "%g s and %g%%", po.max_change, po.max_change_pct);
    else if (po.have_change)
        snprintf(lim, sizeof lim, "%g s", po.max_change);
    else
        snprintf(lim, sizeof lim, "%g%%", po.max_change_pct);
    *gp = (guard){"change", 1, ""};
    if (!have_cur) {
        gp->ok = -1;
        snprintf(gp->detail, sizeof gp->detail, "nothing to compare with");
    } else if (!worst) {
        snprintf(gp->detail, sizeof gp->detail, "no promise to compare");
    } else {
        char who[128];
        keys_label(who, sizeof who, r.q, worst->keys);
        if (d.keys_differ)
            snprintf(who, sizeof who, "global");
        double mv = move_of(worst);
        gp->ok = worst_excess <= 0;
        snprintf(gp->detail, sizeof gp->detail, "move nearest the limit %+.1f s (%+.1f%%) at %s, target %g; limit %s", mv,
                 worst->old_promise > 0 ? 100 * mv / worst->old_promise : 0.0, who, worst->target, lim);
    }

    gp = &g[ng++];
    *gp = (guard){"layout", 1, ""};
    if (!have_cur) {
        gp->ok = -1;
        snprintf(gp->detail, sizeof gp->detail, "nothing to compare with");
    } else {
        char why[200];
        if (layout_problem(cur, r.q, why, sizeof why)) {
            gp->ok = po.allow_layout;
            snprintf(gp->detail, sizeof gp->detail, "%s%s", why,
                     po.allow_layout ? " (allowed: --allow-layout-change)" : "");
        } else {
            snprintf(gp->detail, sizeof gp->detail, "same key columns; every current target kept");
        }
    }

    gp = &g[ng++];
    *gp = (guard){"holdout", -1, ""};
    if (a.holdout > 0) {
        size_t nt = r.q->ntargets, w = 0, n = r.ho.n[0];
        int ok = 1;
        for (size_t t = 0; t < nt && w < sizeof gp->detail; t++) {
            double lo = 0, hi = 0;
            size_t hits = r.ho.hits[t];
            etacal_error e3;
            if (n == 0 || etacal_binom_wilson(hits, n, 0.95, &lo, &hi, &e3) != ETACAL_OK)
                ok = 0;
            else if (hi < r.q->targets[t])
                ok = 0;
            w += (size_t)snprintf(gp->detail + w, sizeof gp->detail - w,
                                  "%starget %g: %.2f%% on time (%zu/%zu), Wilson 95%% %.4f-%.4f", t ? "; " : "",
                                  r.q->targets[t], n ? 100.0 * (double)hits / (double)n : 0.0, hits, n, lo, hi);
        }
        if (po.require_holdout)
            gp->ok = ok;
        else if (w < sizeof gp->detail)
            snprintf(gp->detail + w, sizeof gp->detail - w, " (not required)");
    } else {
        snprintf(gp->detail, sizeof gp->detail, "no --holdout");
    }

    gp = &g[ng++];
    *gp = (guard){"well formed", 0, ""};
    {
        etacal_error e4;
        etacal_error_clear(&e4);
        int rb = etacal_quotes_read_csv(of.tmp, ',', &back, &e4);
        if (rb == ETACAL_ENOMEM) {
            err = e4;
            rc = rb;
            goto fail;
        }
        if (rb != 0)
            snprintf(gp->detail, sizeof gp->detail, "the new table does not read back: %.200s", e4.msg);
        else if (!same_table(r.q, back))
            snprintf(gp->detail, sizeof gp->detail, "the new table reads back different from what was written");
        else {
            gp->ok = 1;
            snprintf(gp->detail, sizeof gp->detail, "the new table reads back as written (%zu row%s)", back->nrows,
                     back->nrows == 1 ? "" : "s");
        }
    }

    int refused = 0;
    for (size_t i = 0; i < ng; i++)
        refused |= g[i].ok == 0;

    /* ---- replace ---- */
    double when = now_utc();
    char stamp[32], iso[32];
    {
        time_t tt = (time_t)when;
        struct tm tmv;
        gmtime_r(&tt, &tmv);
        strftime(stamp, sizeof stamp, "%Y%m%dT%H%M%SZ", &tmv);
        strftime(iso, sizeof iso, "%Y-%m-%dT%H:%M:%SZ", &tmv);
    }
    char prev[4096], meta[4096], hist[4096] = "";
    snprintf(prev, sizeof prev, "%s.prev", po.table);
    snprintf(meta, sizeof meta, "%s.meta.json", po.table);
    int kept = 0;
    const char *outcome = refused ? "refused" : po.dry_run ? "dry run" : "published";
    if (refused || po.dry_run) {
        etacal_outfile_abort(&of);
    } else {
        rc = etacal_keep_copy(po.table, prev, &kept, &err);
        if (rc)
            goto fail;
        rc = etacal_outfile_commit(&of, &err);
        if (rc)
            goto fail;
    }

    /* ---- the provenance record ---- */
    json_t *rec = json_object();
    json_object_set_new(rec, "etacal", json_string(ETACAL_VERSION));
    json_object_set_new(rec, "written_at", json_string(iso));
    json_t *cmdline = json_array();
    json_array_append_new(cmdline, json_string("etacal"));
    for (int i = 0; i < argc; i++)
        json_array_append_new(cmdline, json_string(given[i]));
    json_object_set_new(rec, "command", cmdline);
    json_t *inp = json_object();
    json_object_set_new(inp, "path", json_string(path));
    json_object_set_new(inp, "sha256", json_string(in_sha));
    json_object_set_new(inp, "bytes", json_integer((json_int_t)in_bytes));
    json_object_set_new(inp, "rows_read", json_integer((json_int_t)rs->data_rows));
    json_object_set_new(inp, "rows_used", json_integer((json_int_t)used));
    json_object_set_new(inp, "rows_missing", json_integer((json_int_t)rs->missing));
    json_object_set_new(inp, "rows_skipped_bad", json_integer((json_int_t)rs->bad));
    json_object_set_new(rec, "input", inp);
    if (r.time_col >= 0 && used) {
        const double *tm = etacal_table_num(r.t, (size_t)r.time_col);
        double lo = tm[0], hi = tm[0];
        for (size_t i = 1; i < used; i++) {
            lo = fmin(lo, tm[i]);
            hi = fmax(hi, tm[i]);
        }
        char b1[64], b2[64];
        etacal_time_format(lo, b1);
        etacal_time_format(hi, b2);
        json_t *tr = json_object();
        json_object_set_new(tr, "column", json_string(a.timecol));
        json_object_set_new(tr, "first", json_string(b1));
        json_object_set_new(tr, "last", json_string(b2));
        json_object_set_new(rec, "time_range", tr);
    }
    json_t *tab = json_object();
    json_object_set_new(tab, "sha256", json_string(tab_sha));
    json_object_set_new(tab, "method", json_string(etacal_method_name(r.q->method)));
    json_t *tg = json_array();
    for (size_t t = 0; t < r.q->ntargets; t++)
        json_array_append_new(tg, json_real(r.q->targets[t]));
    json_object_set_new(tab, "targets", tg);
    json_object_set_new(tab, "rows", json_integer((json_int_t)r.q->nrows));
    json_object_set_new(rec, "table", tab);
    json_t *gj = json_array();
    for (size_t i = 0; i < ng; i++) {
        json_t *o = json_object();
        json_object_set_new(o, "guard", json_string(g[i].name));
        json_object_set_new(o, "result", json_string(g[i].ok > 0 ? "ok" : g[i].ok == 0 ? "failed" : "not checked"));
        json_object_set_new(o, "detail", json_string(g[i].detail));
        json_array_append_new(gj, o);
    }
    json_object_set_new(rec, "guards", gj);
    char *rec_text = NULL;
    size_t rec_len = 0;
    FILE *rs_fp = open_memstream(&rec_text, &rec_len);
    int jrc = rs_fp ? json_out(rec, rs_fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(15), NULL, &err)
                    : etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
    int rs_bad = rs_fp && (fflush(rs_fp) != 0 || ferror(rs_fp));
    if (rs_fp && (fclose(rs_fp) != 0 || rs_bad || !rec_text) && jrc == 0)
        jrc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
    if (jrc) {
        free(rec_text);
        json_decref(rec);
        rc = jrc;
        if (!refused && !po.dry_run) {
            fprintf(stderr, "etacal: publish: the table is published, but its provenance record is not: %s\n",
                    err.msg);
            status = EXIT_DATA;
            goto report;
        }
        goto fail;
    }
    if (!refused && !po.dry_run) {
        size_t len = rec_len;
        rc = etacal_write_file(meta, rec_text, len, &err);
        if (rc == 0 && po.history) {
            if (mkdir(po.history, 0777) != 0 && errno != EEXIST) {
                rc = etacal_error_set(&err, ETACAL_EIO, po.history, "cannot create the history directory: %s",
                                      strerror(errno));
            } else {
                const char *base = strrchr(po.table, '/');
                base = base ? base + 1 : po.table;
                struct stat hs;
                for (int k = 1; k < 1000; k++) {
                    if (k == 1)
                        snprintf(hist, sizeof hist, "%s/%s.%s", po.history, base, stamp);
                    else
                        snprintf(hist, sizeof hist, "%s/%s.%s-%d", po.history, base, stamp, k);
                    if (stat(hist, &hs) != 0)
                        break;
                }
                rc = etacal_write_file(hist, buf, buflen, &err);
                if (rc == 0) {
                    char hm[4200];
                    snprintf(hm, sizeof hm, "%s.meta.json", hist);
                    rc = etacal_write_file(hm, rec_text, len, &err);
                }
            }
        }
        if (rc) {
            free(rec_text);
            json_decref(rec);
            /* the table itself is published: say what did not follow */
            fprintf(stderr, "etacal: publish: the table is published, but: %s%s%s\n", err.where,
                    err.where[0] ? ": " : "", err.msg);
            status = EXIT_DATA;
            goto report;
        }
    }
    free(rec_text);
    json_decref(rec);

report:;
    /* ---- the change report ---- */
    int report_bad = 0;
    if (have_cur)
        qsort(d.moves, d.nmoves, sizeof *d.moves, by_size_of_move);
    if (po.quiet) {
        /* no report: the refusal line below, if any */
    } else if (json) {
        root = json_object();
        json_object_set_new(root, "etacal", json_string(ETACAL_VERSION));
        json_object_set_new(root, "table", json_string(po.table));
        json_object_set_new(root, "input", json_string(path));
        json_object_set_new(root, "outcome", json_string(outcome));
        json_t *rows = json_object();
        json_object_set_new(rows, "read", json_integer((json_int_t)rs->data_rows));
        json_object_set_new(rows, "used", json_integer((json_int_t)used));
        json_object_set_new(rows, "missing", json_integer((json_int_t)rs->missing));
        json_object_set_new(rows, "skipped_bad", json_integer((json_int_t)rs->bad));
        json_object_set_new(root, "rows", rows);
        json_t *ref = json_object();
        json_object_set_new(ref, "pred_s", json_real(ref_pred));
        for (size_t j = 0; j < a.nx; j++)
            json_object_set_new(ref, a.xs[j], json_real(ref_x[j]));
        json_object_set_new(root, "reference", ref);
        json_t *segs = json_object();
        json_object_set_new(segs, "added", json_integer((json_int_t)d.segs_added));
        json_object_set_new(segs, "removed", json_integer((json_int_t)d.segs_removed));
        json_object_set_new(segs, "changed", json_integer((json_int_t)d.segs_changed));
        json_object_set_new(segs, "unchanged", json_integer((json_int_t)d.segs_same));
        json_object_set_new(root, "segments", have_cur ? segs : (json_decref(segs), json_null()));
        json_t *mv = json_array();
        for (size_t i = 0; i < d.nmoves; i++) {
            const etacal_quote_move *m = &d.moves[i];
            json_t *o = json_object();
            json_object_set_new(o, "keys", keys_json(d.keys_differ ? r.q : r.q, m->keys));
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
        for (size_t i = 0; i < ng; i++) {
            json_t *o = json_object();
            json_object_set_new(o, "guard", json_string(g[i].name));
            json_object_set_new(o, "result",
                                json_string(g[i].ok > 0 ? "ok" : g[i].ok == 0 ? "failed" : "not checked"));
            json_object_set_new(o, "detail", json_string(g[i].detail));
            json_array_append_new(gr, o);
        }
        json_object_set_new(root, "guards", gr);
        etacal_error je;
        if (json_out(root, stdout, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10), "stdout", &je))
            report_bad = 1;
    } else {
        printf("etacal publish: %s from %s\n", po.table, path);
        printf("rows: %zu read, %zu used, %zu left out (missing actual or prediction), %zu malformed skipped\n",
               rs->data_rows, used, rs->missing, rs->bad);
        print_table_line("new table", r.q);
        if (have_cur) {
            print_table_line("current table", cur);
            printf("reference order: prediction %.1f s", ref_pred);
            for (size_t j = 0; j < a.nx; j++)
                printf(", %s %g", a.xs[j], ref_x[j]);
            printf(" (%s)\n", po.have_ref ? "--ref-pred" : "medians of the data");
            printf("segments: %zu added, %zu removed, %zu changed, %zu unchanged; %zu promises compared\n",
                   d.segs_added, d.segs_removed, d.segs_changed, d.segs_same, compared);
            size_t shown = 0;
            for (size_t i = 0; i < d.nmoves; i++)
                shown += isfinite(move_of(&d.moves[i])) && move_of(&d.moves[i]) != 0;
            if (shown && po.show) {
                printf("\nlargest moves of the promise at the reference order:\n");
                size_t nk = r.q->nkeys ? r.q->nkeys : 1;
                text_table tt;
                if (tt_init(&tt, nk + 4) != 0) {
                    report_bad = 1;
                } else {
                    const char *cells[FIT_MAX_KEYS + 4];
                    char b[4][48];
                    size_t k = 0;
                    for (size_t j = 0; j < r.q->nkeys; j++)
                        cells[k++] = r.q->key_names[j];
                    if (!r.q->nkeys)
                        cells[k++] = "segment";
                    cells[k++] = "target";
                    cells[k++] = "current s";
                    cells[k++] = "new s";
                    cells[k++] = "move s";
                    tt_add(&tt, cells);
                    for (size_t j = nk; j < nk + 4; j++)
                        tt.right[j] = 1;
                    size_t listed = 0;
                    for (size_t i = 0; i < d.nmoves && listed < po.show; i++) {
                        const etacal_quote_move *m = &d.moves[i];
                        double mvv = move_of(m);
                        if (!isfinite(mvv) || mvv == 0)
                            continue;
                        k = 0;
                        for (size_t j = 0; j < r.q->nkeys; j++)
                            cells[k++] = d.keys_differ ? "*" : m->keys[j];
                        if (!r.q->nkeys)
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
                    if (tt_print(&tt, stdout) != 0)
                        report_bad = 1;
                    tt_free(&tt);
                }
            }
            int head = 0;
            for (size_t i = 0; i < d.nmoves; i++) {
                const etacal_quote_move *m = &d.moves[i];
                if (m->in_old == m->in_new)
                    continue;
                if (!head++)
                    printf("\nsegments with a row in one table only:\n");
                char who[160];
                keys_label(who, sizeof who, m->in_new ? r.q : cur, m->keys);
                printf("  %s %s at target %g\n", m->in_new ? "added  " : "removed", who, m->target);
            }
        } else {
            printf("current table: %s\n", cur_problem[0] ? "not valid" : "none");
        }
        printf("\nguards:\n");
        text_table tt;
        if (tt_init(&tt, 3) != 0) {
            report_bad = 1;
        } else {
            for (size_t i = 0; i < ng; i++) {
                const char *cells[3] = {g[i].name, g[i].ok > 0 ? "ok" : g[i].ok == 0 ? "FAILED" : "-",
                                        g[i].detail};
                tt_add(&tt, cells);
            }
            if (tt_print(&tt, stdout) != 0)
                report_bad = 1;
            tt_free(&tt);
        }
        putchar('\n');
        if (refused)
            printf("refused: nothing replaced; %s is left as it was\n", po.table);
        else if (po.dry_run)
            printf("dry run: every guard holds; %s is unchanged\n", po.table);
        else {
            printf("published: %s", po.table);
            if (kept)
                printf(" (the previous table kept as %s)", prev);
            printf("; provenance in %s", meta);
            if (hist[0])
                printf("; history copy %s", hist);
            putchar('\n');
        }
    }
    fflush(stdout); /* the report before the lines on stderr */
    if (report_bad) {
        fprintf(stderr, "etacal: publish: out of memory: the change report is incomplete%s\n",
                refused || po.dry_run ? "; nothing replaced" : "; the table is published");
        status = EXIT_DATA;
    }
    if (refused) {
        for (size_t i = 0; i < ng; i++)
            if (g[i].ok == 0)
                fprintf(stderr, "etacal: publish: refused by the %s guard: %s\n", g[i].name, g[i].detail);
        if (!report_bad)
            status = EXIT_REFUSED;
    }
    json_decref(root);
    free(buf);
    etacal_quotes_diff_free(&d);
    etacal_quotes_destroy(back);
    etacal_quotes_destroy(cur);
    fit_result_free(&r);
    etacal_lock_release(lock);
    return status;
fail:
    etacal_outfile_abort(&of);
    free(buf);
    etacal_quotes_diff_free(&d);
    etacal_quotes_destroy(back);
    etacal_quotes_destroy(cur);
    fit_result_free(&r);
    etacal_lock_release(lock);
    return report_error(&err);
}
