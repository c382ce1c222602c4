/* SPDX-License-Identifier: GPL-3.0-or-later */
/* cmd_check.c: `etacal check`: validate promises, intervals and quantile
 * forecasts against actuals, overall and per segment, and gate a release
 * on the result.  Output as aligned text, CSV or JSON (jansson). */
#include "cli.h"

#include <errno.h>
#include <getopt.h>
#include <jansson.h>
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

static const char *measure_kind(int kind)
{
    return kind == ETACAL_MEASURE_UPPER ? "upper" : kind == ETACAL_MEASURE_INTERVAL ? "interval" : "quantile";
}

static void label(char *buf, size_t n, const etacal_check_result *r, size_t k, const etacal_table *t)
{
    const etacal_measure_def *d = &r->measures[k];
    const char *c = etacal_table_col_name(t, d->col);
    if (d->kind == ETACAL_MEASURE_INTERVAL)
        snprintf(buf, n, "interval [%s, %s]", etacal_table_col_name(t, d->col2), c);
    else if (d->kind == ETACAL_MEASURE_UPPER)
        snprintf(buf, n, "upper %s", c);
    else
        snprintf(buf, n, "quantile %s", c);
}

static void fmt(char *buf, size_t n, const char *f, double v)
{
    if (isnan(v))
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, f, v);
}

/* The verdict of the gate on one figure. */
static const char *verdict(const etacal_check_result *r, size_t g, const etacal_measure *m)
{
    if (m->tested)
        return m->reject ? "under" : "ok";
    if (!isnan(r->measures[0].nominal) && r->segs[g].thin && (g != 0 || !r->table_law))
        return "thin";
    return "-";
}

static void fmt_p(char *buf, size_t n, double p)
{
    if (isnan(p))
        snprintf(buf, n, "-");
    else
        snprintf(buf, n, "%.3g", p);
}

/* The gate's tests: how, and one line per figure. */
static int write_gate_text(FILE *fp, const etacal_check_result *r, const etacal_table *t, const char *table_path)
{
    char lv[32];
    snprintf(lv, sizeof lv, "%g", r->gate_level);
    if (r->table_law) {
        char tg[ETACAL_NUM_BUFSZ];
        etacal_num_format(r->target, tg);
        fprintf(fp,
                "\ngate test under the law of the table %s at target %s: the orders each table row\n"
                "served, against Beta-binomial(orders, k, n+1-k), the law of the hits of a\n"
                "split-conformal bound of rank k among n calibration rows (Vovk 2012);\n"
                "one-sided, p = P(H <= hits), Holm (1979) across %zu rows at family-wise error %s\n",
                table_path, tg, r->ntests, lv);
    } else {
        fprintf(fp,
                "\ngate test: each figure's hits against Binomial(n, nominal), one-sided, p = P(X <= hits),\n"
                "Holm (1979) across %zu figures at family-wise error %s.\n"
                "Calibration noise is not accounted for: a fitted table's own coverage is random\n"
                "(Beta(k, n+1-k) for rank k of n; Vovk 2012), so an honest table can fail this\n"
                "gate; give --table QUOTES.csv to test against that law.\n",
                r->ntests, lv);
    }
    size_t nk = r->nkeys ? r->nkeys : 1;
    enum { NG = 10 };
    size_t ng = r->table_law ? 9 : 8;
    text_table tt;
    if (tt_init(&tt, nk + ng) != 0)
        return -1;
    const char *cells[MAX_KEYS + NG];
    size_t c = 0;
    for (size_t j = 0; j < r->nkeys; j++)
        cells[c++] = r->key_names[j];
    if (!r->nkeys)
        cells[c++] = "segment";
    static const char *hlaw[NG] = {"n", "k", "expected", "orders", "hits", "coverage", "p", "p_holm", "verdict", ""};
    static const char *hbin[NG] = {"measure", "n", "hits", "coverage", "nominal", "p", "p_holm", "verdict", "", ""};
    for (size_t i = 0; i < ng; i++)
        cells[c + i] = r->table_law ? hlaw[i] : hbin[i];
    tt_add(&tt, cells);
    for (size_t i = nk; i < nk + ng - 1; i++)
        tt.right[i] = 1;
    if (!r->table_law)
        tt.right[nk] = 0;
    for (size_t g = 0; g < r->nsegs; g++) {
        const etacal_check_segment *sg = &r->segs[g];
        if (r->table_law && g == 0)
            continue; /* the overall figure mixes the rows' laws: not tested */
        for (size_t k = 0; k < r->nmeasures; k++) {
            const etacal_measure *m = &sg->m[k];
            c = 0;
            for (size_t j = 0; j < r->nkeys; j++)
                cells[c++] = sg->keys[j];
            if (!r->nkeys)
                cells[c++] = "*";
            char b[NG][96];
            size_t i = 0;
            if (r->table_law) {
                snprintf(b[i++], sizeof b[0], "%zu", sg->cal_n);
                snprintf(b[i++], sizeof b[0], "%zu", sg->cal_k);
                snprintf(b[i++], sizeof b[0], "%.4f", (double)sg->cal_k / (double)(sg->cal_n + 1));
            } else {
                label(b[i++], sizeof b[0], r, k, t);
            }
            snprintf(b[i++], sizeof b[0], "%zu", m->n);
            snprintf(b[i++], sizeof b[0], "%zu", m->hits);
            fmt(b[i++], sizeof b[0], "%.4f", m->coverage);
            if (!r->table_law)
                fmt(b[i++], sizeof b[0], "%.4f", r->measures[k].nominal);
            fmt_p(b[i++], sizeof b[0], m->p);
            fmt_p(b[i++], sizeof b[0], m->p_holm);
            snprintf(b[i++], sizeof b[0], "%s", verdict(r, g, m));
            for (size_t x = 0; x < i; x++)
                cells[c + x] = b[x];
            tt_add(&tt, cells);
        }
    }
    int bad = tt_print(&tt, fp) != 0;
    tt_free(&tt);
    return bad ? -1 : 0;
}

/* Returns 0, or -1 when out of memory. */
static int write_text(FILE *fp, const char *path, const etacal_table *t, const etacal_check_result *r,
                       int gate, const char *table_path)
{
    const etacal_read_stats *st = etacal_table_stats(t);
    char cl[ETACAL_NUM_BUFSZ];
    etacal_percent_label(r->confidence, cl);
    fprintf(fp, "etacal check: %s\n", path);
    fprintf(fp, "rows: %zu read, %zu used, %zu left out (missing value), %zu malformed skipped\n", st->data_rows,
            st->kept, st->missing, st->bad);
    fprintf(fp, "intervals: %s%% %s; segments with fewer than %zu rows are marked thin\n\n", cl,
            r->ci == ETACAL_CI_EXACT ? "Clopper-Pearson" : "Wilson", r->min_rows);
    size_t nk = r->nkeys ? r->nkeys : 1;
    enum { NFIX = 13 };
    size_t ncols = nk + NFIX;
    text_table tt;
    if (tt_init(&tt, ncols) != 0)
        return -1;
    const char *cells[MAX_KEYS + NFIX];
    char buf[NFIX][64];
    size_t c = 0;
    for (size_t j = 0; j < r->nkeys; j++)
        cells[c++] = r->key_names[j];
    if (!r->nkeys)
        cells[c++] = "segment";
    const char *head[NFIX] = {"measure", "n", "hits", "coverage", "nominal", "ci", "status", "pinball",
                              "int.score", "width_s", "slack_s", "late_s", "note"};
    snprintf(buf[0], sizeof buf[0], "%s%% CI", cl);
    for (size_t i = 0; i < NFIX; i++)
        cells[c + i] = i == 5 ? buf[0] : head[i];
    tt_add(&tt, cells);
    for (size_t i = nk + 1; i < nk + 12; i++)
        tt.right[i] = 1;
    tt.right[nk + 5] = 0;
    tt.right[nk + 6] = 0;
    for (size_t g = 0; g < r->nsegs; g++) {
        const etacal_check_segment *sg = &r->segs[g];
        for (size_t k = 0; k < r->nmeasures; k++) {
            const etacal_measure *m = &sg->m[k];
            const etacal_measure_def *d = &r->measures[k];
            c = 0;
            for (size_t j = 0; j < r->nkeys; j++)
                cells[c++] = sg->keys[j];
            if (!r->nkeys)
                cells[c++] = "*";
            char b[NFIX][96];
            label(b[0], sizeof b[0], r, k, t);
            snprintf(b[1], sizeof b[1], "%zu", m->n);
            snprintf(b[2], sizeof b[2], "%zu", m->hits);
            fmt(b[3], sizeof b[3], "%.4f", m->coverage);
            fmt(b[4], sizeof b[4], "%.4f", d->nominal);
            if (isnan(m->ci_lo))
                snprintf(b[5], sizeof b[5], "-");
            else
                snprintf(b[5], sizeof b[5], "%.4f-%.4f", m->ci_lo, m->ci_hi);
            snprintf(b[6], sizeof b[6], "%s", etacal_status_name(m->status));
            fmt(b[7], sizeof b[7], "%.2f", m->pinball);
            fmt(b[8], sizeof b[8], "%.1f", m->interval_score);
            fmt(b[9], sizeof b[9], "%.1f", m->mean_width);
            fmt(b[10], sizeof b[10], "%.1f", m->mean_slack);
            fmt(b[11], sizeof b[11], "%.1f", m->mean_lateness);
            snprintf(b[12], sizeof b[12], "%s", sg->thin ? "thin" : "");
            for (size_t i = 0; i < NFIX; i++)
                cells[c + i] = b[i];
            tt_add(&tt, cells);
        }
    }
    int bad = tt_print(&tt, fp) != 0;
    tt_free(&tt);
    if (bad)
        return -1;
    if (r->nq_sorted >= 2) {
        const etacal_check_segment *all = &r->segs[0];
        fprintf(fp, "\ncalibration of the quantile forecast (all rows): nominal tau against the share of\n"
                    "actuals at or below the quantile\n");
        text_table ct;
        if (tt_init(&ct, 5) != 0)
            return -1;
        {
            const char *h[5] = {"column", "tau", "share below", buf[0], "status"};
            tt_add(&ct, h);
            ct.right[1] = ct.right[2] = 1;
            for (size_t k = r->nmeasures - r->nq_sorted; k < r->nmeasures; k++) {
                char b[5][64];
                const etacal_measure *m = &all->m[k];
                snprintf(b[0], sizeof b[0], "%s", etacal_table_col_name(t, r->measures[k].col));
                snprintf(b[1], sizeof b[1], "%.4f", r->measures[k].nominal);
                fmt(b[2], sizeof b[2], "%.4f", m->coverage);
                snprintf(b[3], sizeof b[3], "%.4f-%.4f", m->ci_lo, m->ci_hi);
                snprintf(b[4], sizeof b[4], "%s", etacal_status_name(m->status));
                const char *row[5] = {b[0], b[1], b[2], b[3], b[4]};
                tt_add(&ct, row);
            }
            bad = tt_print(&ct, fp) != 0;
            tt_free(&ct);
            if (bad)
                return -1;
        }
        fprintf(fp, "crossing: %zu of %zu rows have a lower-tau quantile above a higher one\n",
                all->crossing_rows, all->n);
    }
    if ((gate || r->table_law) && write_gate_text(fp, r, t, table_path) != 0)
        return -1;
    if (gate)
        fprintf(fp, "\ngate: %s (%zu of %zu %s under after Holm's correction)\n",
                r->gate_failed ? "FAILED" : "passed", r->nrejected, r->ntests, r->table_law ? "table rows" : "figures");
    return 0;
}

static void csv_num(FILE *fp, double v, const char *f)
{
    if (!isnan(v))
        fprintf(fp, f, v);
}

static void write_csv(FILE *fp, const etacal_table *t, const etacal_check_result *r, int gate)
{
    int gcols = gate || r->table_law;
    for (size_t j = 0; j < r->nkeys; j++) {
        csv_field(fp, r->key_names[j]);
        putc(',', fp);
    }
    fputs("measure,column,column2,nominal,n,hits,coverage,ci_low,ci_high,status,thin,pinball,"
          "interval_score,mean_width_s,mean_slack_s,mean_lateness_s,late,crossing_rows",
          fp);
    if (gcols)
        fputs(",p,p_holm,verdict", fp);
    if (r->table_law)
        fputs(",table_n,table_k", fp);
    putc('\n', fp);
    for (size_t g = 0; g < r->nsegs; g++) {
        const etacal_check_segment *sg = &r->segs[g];
        for (size_t k = 0; k < r->nmeasures; k++) {
            const etacal_measure *m = &sg->m[k];
            const etacal_measure_def *d = &r->measures[k];
            for (size_t j = 0; j < r->nkeys; j++) {
                csv_field(fp, sg->keys[j]);
                putc(',', fp);
            }
            fprintf(fp, "%s,", measure_kind(d->kind));
            csv_field(fp, etacal_table_col_name(t, d->col));
            putc(',', fp);
            if (d->kind == ETACAL_MEASURE_INTERVAL)
                csv_field(fp, etacal_table_col_name(t, d->col2));
            putc(',', fp);
            csv_num(fp, d->nominal, "%.10g");
            fprintf(fp, ",%zu,%zu,", m->n, m->hits);
            csv_num(fp, m->coverage, "%.10g");
            putc(',', fp);
            csv_num(fp, m->ci_lo, "%.10g");
            putc(',', fp);
            csv_num(fp, m->ci_hi, "%.10g");
            fprintf(fp, ",%s,%d,", m->status == ETACAL_STATUS_NONE ? "" : etacal_status_name(m->status), sg->thin);
            csv_num(fp, m->pinball, "%.10g");
            putc(',', fp);
            csv_num(fp, m->interval_score, "%.10g");
            putc(',', fp);
            csv_num(fp, m->mean_width, "%.10g");
            putc(',', fp);
            csv_num(fp, m->mean_slack, "%.10g");
            putc(',', fp);
            csv_num(fp, m->mean_lateness, "%.10g");
            putc(',', fp);
            if (d->kind == ETACAL_MEASURE_UPPER)
                fprintf(fp, "%zu", m->late);
            putc(',', fp);
            if (r->nq_sorted >= 2)
                fprintf(fp, "%zu", sg->crossing_rows);
            if (gcols) {
                putc(',', fp);
                csv_num(fp, m->p, "%.10g");
                putc(',', fp);
                csv_num(fp, m->p_holm, "%.10g");
                const char *v = verdict(r, g, m);
                fprintf(fp, ",%s", strcmp(v, "-") ? v : "");
            }
            if (r->table_law && g > 0)
                fprintf(fp, ",%zu,%zu", sg->cal_n, sg->cal_k);
            else if (r->table_law)
                fputs(",,", fp);
            putc('\n', fp);
        }
    }
}

/* NaN and infinities become null (STYLE.md). */
static json_t *jnum(double v) { return isfinite(v) ? json_real(v) : json_null(); }

static json_t *build_json(const char *path, const etacal_table *t, const etacal_check_result *r, int gate,
                          const char *table_path)
{
    const etacal_read_stats *st = etacal_table_stats(t);
    json_t *root = json_object();
    json_object_set_new(root, "etacal", json_string(ETACAL_VERSION));
    json_object_set_new(root, "file", json_string(path));
    json_object_set_new(root, "rows", json_pack("{s:I,s:I,s:I,s:I}", "read", (json_int_t)st->data_rows, "used",
                                                (json_int_t)st->kept, "missing", (json_int_t)st->missing,
                                                "malformed", (json_int_t)st->bad));
    json_object_set_new(root, "confidence", json_real(r->confidence));
    json_object_set_new(root, "ci", json_string(r->ci == ETACAL_CI_EXACT ? "exact" : "wilson"));
    json_object_set_new(root, "min_rows", json_integer((json_int_t)r->min_rows));
    json_t *keys = json_array();
    for (size_t j = 0; j < r->nkeys; j++)
        json_array_append_new(keys, json_string(r->key_names[j]));
    json_object_set_new(root, "keys", keys);
    json_t *segs = json_array();
    for (size_t g = 0; g < r->nsegs; g++) {
        const etacal_check_segment *sg = &r->segs[g];
        json_t *s = json_object();
        json_t *kv = json_object();
        for (size_t j = 0; j < r->nkeys; j++)
            json_object_set_new(kv, r->key_names[j], json_string(sg->keys[j]));
        json_object_set_new(s, "keys", kv);
        json_object_set_new(s, "overall", json_boolean(g == 0));
        json_object_set_new(s, "n", json_integer((json_int_t)sg->n));
        json_object_set_new(s, "thin", json_boolean(sg->thin));
        if (r->table_law)
            json_object_set_new(s, "table_row", g ? json_pack("{s:I,s:I}", "n", (json_int_t)sg->cal_n, "k",
                                                              (json_int_t)sg->cal_k)
                                                  : json_null());
        json_object_set_new(s, "crossing_rows",
                            r->nq_sorted >= 2 ? json_integer((json_int_t)sg->crossing_rows) : json_null());
        json_t *ms = json_array();
        for (size_t k = 0; k < r->nmeasures; k++) {
            const etacal_measure *m = &sg->m[k];
            const etacal_measure_def *d = &r->measures[k];
            json_t *o = json_object();
            json_object_set_new(o, "measure", json_string(measure_kind(d->kind)));
            json_object_set_new(o, "column", json_string(etacal_table_col_name(t, d->col)));
            if (d->kind == ETACAL_MEASURE_INTERVAL)
                json_object_set_new(o, "lower_column", json_string(etacal_table_col_name(t, d->col2)));
            json_object_set_new(o, "nominal", jnum(d->nominal));
            json_object_set_new(o, "n", json_integer((json_int_t)m->n));
            json_object_set_new(o, "hits", json_integer((json_int_t)m->hits));
            json_object_set_new(o, "coverage", jnum(m->coverage));
            json_object_set_new(o, "ci", json_pack("[o,o]", jnum(m->ci_lo), jnum(m->ci_hi)));
            json_object_set_new(o, "status",
                                m->status == ETACAL_STATUS_NONE ? json_null() : json_string(etacal_status_name(m->status)));
            json_object_set_new(o, "pinball", jnum(m->pinball));
            json_object_set_new(o, "interval_score", jnum(m->interval_score));
            json_object_set_new(o, "mean_width_s", jnum(m->mean_width));
            json_object_set_new(o, "mean_slack_s", jnum(m->mean_slack));
            json_object_set_new(o, "mean_lateness_s", jnum(m->mean_lateness));
            json_object_set_new(o, "late",
                                d->kind == ETACAL_MEASURE_UPPER ? json_integer((json_int_t)m->late) : json_null());
            if (gate || r->table_law) {
                const char *v = verdict(r, g, m);
                json_object_set_new(o, "p", jnum(m->p));
                json_object_set_new(o, "p_holm", jnum(m->p_holm));
                json_object_set_new(o, "verdict", strcmp(v, "-") ? json_string(v) : json_null());
            }
            json_array_append_new(ms, o);
        }
        json_object_set_new(s, "measures", ms);
        json_array_append_new(segs, s);
    }
    json_object_set_new(root, "segments", segs);
    json_t *gj = json_null();
    if (gate || r->table_law) {
        gj = json_pack("{s:b,s:s,s:o,s:I,s:I,s:b}", "failed", r->gate_failed, "law",
                       r->table_law ? "beta-binomial" : "binomial", "level", json_real(r->gate_level), "tests",
                       (json_int_t)r->ntests, "rejected", (json_int_t)r->nrejected, "calibration_noise_accounted",
                       r->table_law);
        if (r->table_law) {
            json_object_set_new(gj, "table", json_string(table_path));
            json_object_set_new(gj, "target", json_real(r->target));
        }
    }
    json_object_set_new(root, "gate", gj);
    return root;
}

int cmd_check(int argc, char **argv)
{
    enum { O_ACTUAL = 256, O_UPPER, O_LOWER, O_QUANT, O_BY, O_CONF, O_CI, O_MINROWS, O_FORMAT, O_GATE, O_TABLE,
           O_GLEVEL };
    static const struct option longopts[] = {
        {"actual", required_argument, 0, O_ACTUAL},   {"upper", required_argument, 0, O_UPPER},
        {"lower", required_argument, 0, O_LOWER},     {"quantile", required_argument, 0, O_QUANT},
        {"by", required_argument, 0, O_BY},           {"confidence", required_argument, 0, O_CONF},
        {"ci", required_argument, 0, O_CI},           {"min-rows", required_argument, 0, O_MINROWS},
        {"format", required_argument, 0, O_FORMAT},   {"gate", no_argument, 0, O_GATE},
        {"table", required_argument, 0, O_TABLE},     {"gate-level", required_argument, 0, O_GLEVEL},
        {"output", required_argument, 0, 'o'},        READ_OPTIONS, {"help", no_argument, 0, 'h'},
        {0, 0, 0, 0}};
    const char *actual = NULL, *output = NULL, *format = "text", *table_path = NULL;
    double glevel = NAN;
    char *upper = NULL, *lower = NULL, *by = NULL;
    char *qargs[MAX_Q];
    size_t nq = 0, nkeys = 0;
    char *keys[MAX_KEYS];
    int gate = 0, c;
    etacal_check_opts co = {0};
    co.upper_col = co.lower_col = -1;
    co.upper_level = co.lower_level = NAN;
    co.confidence = 0.95;
    co.ci = ETACAL_CI_WILSON;
    co.min_rows = 30;
    etacal_read_opts ro = {.delim = ',', .bad_rows = ETACAL_BAD_ROWS_ERROR, .max_bad_share = 0.01,
                          .threads = ETACAL_THREADS_AUTO};
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, ":o:h", longopts, NULL)) != -1) {
        switch (c) {
        case O_ACTUAL: actual = optarg; break;
        case O_UPPER: upper = optarg; break;
        case O_LOWER: lower = optarg; break;
        case O_QUANT:
            if (nq >= MAX_Q)
                return usage_error("check", "at most %d --quantile columns", MAX_Q);
            qargs[nq++] = optarg;
            break;
        case O_BY:
            by = optarg;
            nkeys = 0;
            if (parse_names(by, keys, &nkeys, MAX_KEYS) != 0)
                return usage_error("check", "--by takes up to %d comma-separated column names", MAX_KEYS);
            break;
        case O_CONF:
            if (parse_share(optarg, &co.confidence) != 0 || !(co.confidence > 0 && co.confidence < 1))
                return usage_error("check", "--confidence takes a level in (0,1), such as 0.95");
            break;
        case O_CI:
            if (strcmp(optarg, "wilson") == 0)
                co.ci = ETACAL_CI_WILSON;
            else if (strcmp(optarg, "exact") == 0)
                co.ci = ETACAL_CI_EXACT;
            else
                return usage_error("check", "--ci must be wilson or exact");
            break;
        case O_MINROWS:
            if (parse_size(optarg, &co.min_rows) != 0 || co.min_rows == 0)
                return usage_error("check", "--min-rows takes a whole number >= 1");
            break;
        case O_FORMAT:
            if (parse_format(optarg, "check", &format) != 0)
                return EXIT_USAGE;
            break;
        case O_GATE: gate = 1; break;
        case O_TABLE: table_path = optarg; break;
        case O_GLEVEL:
            if (parse_share(optarg, &glevel) != 0 || !(glevel > 0 && glevel < 1))
                return usage_error("check", "--gate-level takes a family-wise error level in (0,1), such as 0.05");
            break;
        case 'o': output = optarg; break;
        case 'h': fputs(help, stdout); return 0;
        default: {
            int r = other_option(c, "check", &ro, argv);
            if (r)
                return r;
            break;
        }
        }
    }
    int nin = one_input(argc, argv, "check", "data file");
    if (nin)
        return nin;
    if (!actual)
        return usage_error("check", "--actual is required");
    if (!upper && nq == 0)
        return usage_error("check", "nothing to check: give --upper or --quantile");
    if (lower && !upper)
        return usage_error("check", "--lower needs --upper (a two-sided interval)");
    if (table_path) {
        if (!upper || !strrchr(upper, '='))
            return usage_error("check", "--table needs --upper COL=LEVEL, LEVEL one of the table's targets");
        if (lower || nq)
            return usage_error("check", "--table checks one-sided promises: not with --lower or --quantile");
        if (nkeys)
            return usage_error("check", "--table groups the orders by the table row that served them: not with --by");
    }
    /* The gate's family-wise error follows the confidence of the intervals
     * unless given. */
    co.gate_level = isnan(glevel) ? 1 - co.confidence : glevel;
    const char *path = argv[optind];

    colset cs = {.n = 0};
    unsigned fflags = ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_FINITE;
    co.actual_col = add_col(&cs, actual, ETACAL_COL_NUM, fflags | ETACAL_NUM_NONNEG, "duration");
    if (upper) {
        if (split_level(upper, &co.upper_level, 0) != 0)
            return usage_error("check", "--upper takes COL or COL=LEVEL with LEVEL in (0,1)");
        co.upper_col = (long)add_col(&cs, upper, ETACAL_COL_NUM, fflags, "bound");
    }
    if (lower) {
        if (split_level(lower, &co.lower_level, 0) != 0)
            return usage_error("check", "--lower takes COL or COL=LEVEL with LEVEL in (0,1)");
        co.lower_col = (long)add_col(&cs, lower, ETACAL_COL_NUM, fflags, "bound");
    }
    if (upper && lower && !isnan(co.upper_level) && !isnan(co.lower_level) && !(co.upper_level > co.lower_level))
        return usage_error("check", "the upper LEVEL must be above the lower LEVEL");
    size_t qcols[MAX_Q];
    double qtaus[MAX_Q];
    for (size_t i = 0; i < nq; i++) {
        if (split_level(qargs[i], &qtaus[i], 1) != 0)
            return usage_error("check", "--quantile takes COL=TAU with TAU in (0,1)");
        for (size_t j = 0; j < i; j++)
            if (qtaus[j] == qtaus[i])
                return usage_error("check", "two --quantile columns at the same level %g", qtaus[i]);
        qcols[i] = add_col(&cs, qargs[i], ETACAL_COL_NUM, fflags, "quantile");
    }
    /* The table first: its key columns are read from the data. */
    etacal_quotes *qt = NULL;
    etacal_error err;
    etacal_error_clear(&err);
    size_t tkey_cols[MAX_KEYS];
    if (table_path) {
        if (etacal_quotes_read_csv(table_path, ',', &qt, &err) != 0)
            return report_error(&err);
        if (etacal_quotes_find_target(qt, co.upper_level) < 0) {
            char list[256];
            size_t w = 0;
            list[0] = '\0';
            for (size_t i = 0; i < qt->ntargets && w + ETACAL_NUM_BUFSZ + 2 < sizeof list; i++) {
                char num[ETACAL_NUM_BUFSZ];
                etacal_num_format(qt->targets[i], num);
                w += (size_t)snprintf(list + w, sizeof list - w, "%s%s", i ? ", " : "", num);
            }
            etacal_quotes_destroy(qt);
            return usage_error("check", "--upper level %g is not a target of the table %s (its targets: %s)",
                               co.upper_level, table_path, list);
        }
        if (qt->nkeys > MAX_KEYS) {
            etacal_quotes_destroy(qt);
            return usage_error("check", "the table has more than %d key columns", MAX_KEYS);
        }
        for (size_t j = 0; j < qt->nkeys; j++) {
            for (size_t i = 0; i < cs.n; i++)
                if (strcmp(cs.spec[i].name, qt->key_names[j]) == 0) {
                    etacal_quotes_destroy(qt);
                    return usage_error("check", "the table's key column '%s' is also a numeric column here",
                                       qt->key_names[j]);
                }
        }
        for (size_t j = 0; j < qt->nkeys; j++)
            tkey_cols[j] = add_col(&cs, qt->key_names[j], ETACAL_COL_KEY, 0, NULL);
        co.table = qt;
        co.table_key_cols = tkey_cols;
        co.table_source = table_path;
    }
    size_t key_cols[MAX_KEYS];
    for (size_t j = 0; j < nkeys; j++) {
        for (size_t i = 0; i < cs.n; i++)
            if (strcmp(cs.spec[i].name, keys[j]) == 0)
                return usage_error("check", "'%s' cannot be both a key and a numeric column", keys[j]);
        for (size_t i = 0; i < j; i++)
            if (strcmp(keys[i], keys[j]) == 0)
                return usage_error("check", "--by names '%s' twice", keys[j]);
    }
    for (size_t j = 0; j < nkeys; j++)
        key_cols[j] = add_col(&cs, keys[j], ETACAL_COL_KEY, 0, NULL);
    co.q_cols = qcols;
    co.q_taus = qtaus;
    co.nq = nq;
    co.key_cols = key_cols;
    co.nkeys = nkeys;

    progress pg = {path, 0, -1};
    ro.progress = progress_cb;
    ro.progress_ud = &pg;
    etacal_table *t = NULL;
    etacal_check_result *r = NULL;
    etacal_outfile of = {0};
    int rc = etacal_table_read_csv(path, cs.spec, cs.n, &ro, &t, &err);
    progress_end(&pg);
    if (rc) {
        etacal_quotes_destroy(qt);
        return report_error(&err);
    }
    rc = etacal_check_run(t, &co, &r, &err);
    if (rc)
        goto fail;
    rc = etacal_outfile_open(&of, output ? output : "-", &err);
    if (rc)
        goto fail;
    if (strcmp(format, "json") == 0) {
        json_t *j = build_json(path, t, r, gate, table_path);
        rc = json_out(j, of.fp, JSON_INDENT(2) | JSON_PRESERVE_ORDER | JSON_REAL_PRECISION(10),
                      output ? output : "stdout", &err);
        json_decref(j);
    } else if (strcmp(format, "csv") == 0) {
        write_csv(of.fp, t, r, gate);
    } else if (write_text(of.fp, path, t, r, gate, table_path) != 0) {
        rc = etacal_error_set(&err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    if (rc == 0)
        rc = etacal_outfile_commit(&of, &err);
    if (rc) {
        etacal_outfile_abort(&of);
        goto fail;
    }
    int failed = r->gate_failed;
    etacal_check_destroy(r);
    etacal_table_destroy(t);
    etacal_quotes_destroy(qt);
    return gate && failed ? EXIT_GATE : 0;
fail:
    etacal_check_destroy(r);
    etacal_table_destroy(t);
    etacal_quotes_destroy(qt);
    return report_error(&err);
}
