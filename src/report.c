/* SPDX-License-Identifier: GPL-3.0-or-later */
/* report.c: the HTML report (see report.h).  It lays out numbers that the
 * other modules computed: the quote table and its fallbacks (quote.c), the
 * on-time counts on held-out rows (holdout.c), the cost curve and its Wilson
 * intervals (curve.c), the binomial bands of the calibration chart
 * (etacal_binom_range), the rolling-origin backtest (backtest.c).  The only
 * counting done here is the residual histogram, a summary for the eye. */
#include "base.h"
#include "results.h"
#include "svg.h"
#include "quote_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define CHART_W 760.0
#define MAX_SEG_SHOWN 60 /* the lowest and highest 30 when there are more */
#define MAX_GRID_ROWS 40
#define MAX_GRID_COLS 24
#define LABEL_CHARS 30

/* ---- the residual histogram ---------------------------------------------- */

void report_hist_release(etacal_report_hist *h)
{
    if (!h)
        return;
    free(h->edges);
    free(h->counts);
    memset(h, 0, sizeof *h);
}

int report_hist_fill(const etacal_table *t, size_t actual_col, size_t pred_col,
                                 const unsigned char *mask, etacal_report_hist *out, etacal_error *err)
{
    memset(out, 0, sizeof *out);
    const double *y = etacal_table_num(t, actual_col), *p = etacal_table_num(t, pred_col);
    size_t n = etacal_table_rows(t), m = 0;
    if (!y || !p)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the actual and prediction columns must be numeric");
    for (size_t i = 0; i < n; i++)
        m += !mask || mask[i];
    if (m == 0)
        return etacal_error_set(err, ETACAL_ENUM, etacal_table_source(t), "no rows for the residual histogram");
    double *r = malloc(m * sizeof *r);
    if (!r)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    size_t k = 0;
    for (size_t i = 0; i < n; i++)
        if (!mask || mask[i])
            r[k++] = y[i] - p[i];
    double lo = etacal_quantile_type1(r, m, 0.005) / 60, hi = etacal_quantile_type1(r, m, 0.995) / 60;
    free(r);
    etacal_svg_ticks tk;
    int rc = etacal_svg_nice_ticks(lo, hi, 50, &tk, err);
    if (rc)
        return rc;
    size_t nb = tk.n > 1 ? tk.n - 1 : 1;
    out->edges = malloc((nb + 1) * sizeof *out->edges);
    out->counts = calloc(nb, sizeof *out->counts);
    if (!out->edges || !out->counts) {
        report_hist_release(out);
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    double k0 = floor(tk.first / tk.step + 0.5);
    for (size_t i = 0; i <= nb; i++)
        out->edges[i] = (k0 + (double)i) * tk.step * 60;
    out->nbins = nb;
    out->n = m;
    double e0 = out->edges[0], e1 = out->edges[nb], w = tk.step * 60;
    for (size_t i = 0; i < n; i++) {
        if (mask && !mask[i])
            continue;
        double d = y[i] - p[i];
        if (d < e0) {
            out->below++;
        } else if (d >= e1) {
            out->above++;
        } else {
            size_t b = (size_t)((d - e0) / w);
            if (b >= nb)
                b = nb - 1;
            /* the division may land one bin off at an edge */
            while (b > 0 && d < out->edges[b])
                b--;
            while (b + 1 < nb && d >= out->edges[b + 1])
                b++;
            out->counts[b]++;
        }
    }
    return ETACAL_OK;
}

/* ---- small writers ------------------------------------------------------- */

static void esc(FILE *fp, const char *s) { etacal_svg_escape(fp, s); }

static const char *num(double x, int nd, char *b)
{
    etacal_svg_num(x, nd, b);
    return b;
}

/* A share as a percentage with nd decimals: "90.11%". */
static const char *pct(double share, int nd, char *b)
{
    size_t l = etacal_svg_num(share * 100, nd, b);
    snprintf(b + l, ETACAL_SVG_NUMSZ - l, "%%");
    return b;
}

/* An on-time target as the user wrote it, in percent: "90%", "97.5%". */
static const char *tgt(double tau, char *b)
{
    etacal_percent_label(tau, b);
    strcat(b, "%");
    return b;
}

/* A duration in days when whole days, else in hours: "14 d", "36 h". */
static void duration(double s, char *b)
{
    size_t l;
    if (s >= 86400 && fmod(s, 86400) == 0) {
        l = etacal_svg_num(s / 86400, 0, b);
        snprintf(b + l, 8, " d");
    } else {
        l = etacal_svg_num(s / 3600, fmod(s, 3600) == 0 ? 0 : 2, b);
        snprintf(b + l, 8, " h");
    }
}

/* The segment's keys joined by " / ", its open keys left out ("all" for
 * the global segment). */
static void seg_label(const etacal_quotes *q, size_t g, char *buf, size_t cap)
{
    size_t w = 0;
    buf[0] = '\0';
    for (size_t j = 0; j < q->nkeys; j++) {
        const char *k = q->segs[g].keys[j];
        if (strcmp(k, "*") == 0)
            continue;
        int n = snprintf(buf + w, cap - w, "%s%s", w ? " / " : "", k);
        if (n < 0 || (size_t)n >= cap - w)
            break;
        w += (size_t)n;
    }
    if (!w)
        snprintf(buf, cap, "all");
}

/* The segment whose row an order of segment g gets at target ti: the
 * quote index's row, as apply finds it. */
static size_t applied(const etacal_quote_index *ix, const etacal_quotes *q, size_t g, size_t ti)
{
    long r = etacal_quote_index_lookup(ix, (const char *const *)q->segs[g].keys, NULL, ti, NULL);
    return r >= 0 ? q->rows[r].seg : 0;
}

static const char *method_phrase(int m)
{
    return m == ETACAL_METHOD_ADD     ? "promise = prediction + buffer"
           : m == ETACAL_METHOD_RATIO ? "promise = prediction \xC3\x97 factor"
                                      : "promise = quantile regression on the prediction + conformal correction";
}

static const char css[] =
    "<style>\n"
    "body{font-family:\"DejaVu Sans\",Verdana,Arial,sans-serif;color:#1a1a1a;background:#fff;margin:0;"
    "font-size:14px;line-height:1.45}\n"
    "main{max-width:820px;margin:0 auto;padding:20px 24px 40px}\n"
    "h1{font-size:24px;margin:0 0 4px}h2{font-size:18px;margin:28px 0 6px;border-bottom:2px solid #0072B2;"
    "padding-bottom:3px}\n"
    ".sub{color:#555;margin:0 0 14px}\n"
    ".kpis{display:flex;gap:12px;flex-wrap:wrap;margin:10px 0}\n"
    ".kpi{flex:1 1 220px;border:1px solid #bbb;border-left:6px solid #0072B2;padding:8px 12px}\n"
    ".kpi.bare{border-left-color:#767676}.kpi .big{font-size:28px;font-weight:bold}\n"
    ".verdict{font-weight:bold}\n"
    ".warn{border-left:6px solid #D55E00;padding:4px 10px;background:#fbeee6}\n"
    "table{border-collapse:collapse;margin:8px 0;font-size:13px}\n"
    "th,td{border:1px solid #ccc;padding:3px 8px;text-align:left;vertical-align:top}\n"
    "td.n,th.n{text-align:right;font-variant-numeric:tabular-nums}\n"
    "table.facts th{background:#f3f3f3;width:110px}\n"
    "thead th{background:#f3f3f3}\n"
    ".note{color:#444;font-size:13px}\n"
    "svg{display:block;margin:6px 0;max-width:100%;height:auto}\n"
    "svg text{font-family:\"DejaVu Sans\",Verdana,Arial,sans-serif}\n"
    "svg text.lbl{font-weight:bold}\n"
    "pre{background:#f6f6f6;border:1px solid #ccc;padding:8px;white-space:pre-wrap;word-break:break-all}\n"
    "@media print{main{max-width:none;padding:0}section{break-inside:avoid}h2{break-after:avoid}"
    ".kpi{border-left-width:3px}}\n"
    "</style>\n";

/* ---- sections ------------------------------------------------------------ */

static void headline(FILE *fp, const etacal_report *r)
{
    const etacal_quotes *q = r->q;
    const etacal_holdout *h = r->ho;
    size_t ti = r->target;
    const etacal_curve_point *p = &r->curve->pts[ti];
    char a[ETACAL_SVG_NUMSZ], b[ETACAL_SVG_NUMSZ], c[ETACAL_SVG_NUMSZ], tb[ETACAL_SVG_NUMSZ];
    double tau = q->targets[ti];
    tgt(tau, tb);
    fputs("<section id=\"headline\">\n<div class=\"kpis\">\n", fp);
    fprintf(fp, "<div class=\"kpi\"><div class=\"big\">%s</div>on time on %zu held-out orders with the "
            "promise (%zu/%zu)<br>95%% CI %s\xE2\x80\x93%s, target %s</div>\n",
            pct(h->n[0] ? (double)h->hits[ti] / (double)h->n[0] : NAN, 1, a), h->n[0], h->hits[ti], h->n[0],
            pct(p->ci_lo, 1, b), pct(p->ci_hi, 1, c), tb);
    double blo = NAN, bhi = NAN;
    etacal_error e;
    if (h->n[0])
        etacal_binom_wilson(h->bare[0], h->n[0], 0.95, &blo, &bhi, &e);
    fprintf(fp, "<div class=\"kpi bare\"><div class=\"big\">%s</div>on time with the bare prediction "
            "(%zu/%zu)<br>95%% CI %s\xE2\x80\x93%s</div>\n",
            pct(h->n[0] ? (double)h->bare[0] / (double)h->n[0] : NAN, 1, a), h->bare[0], h->n[0], pct(blo, 1, b),
            pct(bhi, 1, c));
    fprintf(fp, "<div class=\"kpi\"><div class=\"big\">%s min</div>mean promise on the held-out orders<br>"
            "%s min more than the bare prediction</div>\n</div>\n",
            num(p->mean_promise_s / 60, 1, a), num(p->mean_extra_s / 60, 1, b));
    const char *verdict = !(p->ci_lo == p->ci_lo) ? "no held-out rows"
                          : p->ci_hi < tau        ? "below the target: the promises fall short on these orders"
                          : p->ci_lo > tau        ? "above the target: the promises are more generous than asked"
                                                  : "the 95% interval holds the target";
    fprintf(fp, "<p class=\"verdict\">Reached %s for a target of %s: %s.</p>\n",
            pct(h->n[0] ? (double)h->hits[ti] / (double)h->n[0] : NAN, 2, a), tb, verdict);
    if (r->note) {
        fputs("<p class=\"warn\">Note: ", fp);
        esc(fp, r->note);
        fputs(".</p>\n", fp);
    }
    const etacal_read_stats *st = r->stats;
    fputs("<table class=\"facts\">\n<tr><th>rows</th><td>", fp);
    fprintf(fp, "%zu used of %zu read; %zu left out (missing actual or prediction), %zu malformed skipped",
            st->kept, st->data_rows, st->missing, st->bad);
    fputs("</td></tr>\n<tr><th>time range</th><td>", fp);
    if (r->time_name && isfinite(r->time_min)) {
        char t0[32], t1[32];
        etacal_time_format(r->time_min, t0);
        etacal_time_format(r->time_max, t1);
        fprintf(fp, "%s to %s (", t0, t1);
        esc(fp, r->time_name);
        fputs(")", fp);
    } else {
        fputs("not known (no time column given)", fp);
    }
    fprintf(fp, "</td></tr>\n<tr><th>held out</th><td>%zu rows (", r->held);
    esc(fp, r->held_how ? r->held_how : "");
    fprintf(fp, "); the table below is fitted on the other %zu</td></tr>\n", r->fitted);
    fprintf(fp, "<tr><th>target</th><td>%s on time</td></tr>\n", tb);
    fprintf(fp, "<tr><th>method</th><td>%s: %s%s", etacal_method_name(q->method), method_phrase(q->method),
            q->confidence > 0 ? " (rank with confidence)" : "");
    if (r->half_life_s > 0) {
        char hl[ETACAL_SVG_NUMSZ + 8];
        duration(r->half_life_s, hl);
        fprintf(fp, "; recency weights, half-life %s", hl);
    }
    fputs("</td></tr>\n", fp);
    fputs("<tr><th>columns</th><td>actual ", fp);
    esc(fp, r->actual_name);
    fputs(", prediction ", fp);
    esc(fp, r->pred_name);
    if (q->nkeys) {
        fputs(", segments ", fp);
        for (size_t j = 0; j < q->nkeys; j++) {
            if (j)
                fputs(" \xC3\x97 ", fp);
            esc(fp, q->key_names[j]);
        }
    }
    fputs("</td></tr>\n</table>\n</section>\n", fp);
}

static int cost_curve(FILE *fp, const etacal_report *r, etacal_error *err)
{
    const etacal_quotes *q = r->q;
    const etacal_curve *cv = r->curve;
    size_t nt = q->ntargets, ti = r->target;
    double *x = malloc(nt * sizeof *x), *y = malloc(nt * sizeof *y);
    if (!x || !y) {
        free(x);
        free(y);
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    size_t m = 0;
    double lo = INFINITY, hi = -INFINITY, xlo = INFINITY, xhi = -INFINITY;
    for (size_t i = 0; i < nt; i++) {
        const etacal_curve_point *p = &cv->pts[i];
        if ((q->targets[i] < r->curve_from && i != ti) || !isfinite(p->mean_promise_s))
            continue;
        x[m] = q->targets[i] * 100;
        y[m] = p->mean_promise_s / 60;
        lo = fmin(lo, y[m]);
        hi = fmax(hi, y[m]);
        xlo = fmin(xlo, x[m]);
        xhi = fmax(xhi, x[m]);
        m++;
    }
    const etacal_holdout *h = r->ho;
    double bare = h->n[0] ? h->pred_sum[0] / (double)h->n[0] / 60 : NAN;
    fputs("<section id=\"cost\">\n<h2>What each point of on-time rate costs</h2>\n", fp);
    fputs("<p class=\"note\">For each on-time target, the table fitted at that target on the rows not held out, "
          "applied to the held-out orders: the mean promise they would have been given.</p>\n",
          fp);
    int rc = ETACAL_OK;
    if (m >= 2) {
        if (isfinite(bare)) {
            lo = fmin(lo, bare);
            hi = fmax(hi, bare);
        }
        etacal_svg_chart c;
        etacal_svg_layout lay = {0};
        lay.xsuffix = "%";
        if ((rc = etacal_svg_begin(&c, fp, CHART_W, 360, xlo, xhi, lo, hi,
                                   "Cost curve: mean promise in minutes against the on-time target", &lay, err)) != 0)
            goto out;
        etacal_svg_axes(&c, "on-time target", "mean promise, held-out orders (minutes)");
        char lab[256], a[ETACAL_SVG_NUMSZ], b[ETACAL_SVG_NUMSZ];
        if (isfinite(bare)) {
            snprintf(lab, sizeof lab, "bare prediction: %s min, %s on time", num(bare, 1, a),
                     pct(h->n[0] ? (double)h->bare[0] / (double)h->n[0] : NAN, 1, b));
            etacal_svg_hline(&c, bare, ETACAL_SVG_MUTED, lab);
        }
        const etacal_curve_point *p = &cv->pts[ti];
        char tb[ETACAL_SVG_NUMSZ];
        if (isfinite(p->marginal_s_per_point))
            snprintf(lab, sizeof lab, "target %s: %s min, +%s min per point", tgt(q->targets[ti], tb),
                     num(p->mean_promise_s / 60, 1, a), num(p->marginal_s_per_point / 60, 2, b));
        else
            snprintf(lab, sizeof lab, "target %s: %s min", tgt(q->targets[ti], tb), num(p->mean_promise_s / 60, 1, a));
        etacal_svg_vline(&c, q->targets[ti] * 100, ETACAL_SVG_ALT, lab);
        etacal_svg_line(&c, x, y, m, ETACAL_SVG_MAIN);
        etacal_svg_markers(&c, x, y, m, ETACAL_SVG_MAIN, 2.5);
        static const char *const ll[] = {"mean promise", "chosen target", "bare prediction"};
        static const int ls[] = {ETACAL_SVG_MAIN, ETACAL_SVG_ALT, ETACAL_SVG_MUTED}, lk[] = {0, 0, 0};
        etacal_svg_legend(&c, ll, ls, lk, 3);
        etacal_svg_end(&c);
    } else {
        fputs("<p class=\"note\">Too few targets to draw a curve.</p>\n", fp);
    }
    /* a few targets as a table, with the marginal cost */
    fputs("<table><thead><tr><th class=\"n\">target</th><th class=\"n\">on time (held out)</th>"
          "<th class=\"n\">95% CI</th><th class=\"n\">mean promise min</th><th class=\"n\">extra min</th>"
          "<th class=\"n\">+min per point</th></tr></thead>\n<tbody>\n",
          fp);
    static const double show[] = {0.8, 0.85, 0.9, 0.95, 0.99};
    for (size_t i = 0; i < nt; i++) {
        int want = i == ti;
        for (size_t j = 0; j < sizeof show / sizeof *show; j++)
            want |= q->targets[i] == show[j];
        if (!want || (q->targets[i] < r->curve_from && i != ti))
            continue;
        const etacal_curve_point *p = &cv->pts[i];
        char a[ETACAL_SVG_NUMSZ], b[ETACAL_SVG_NUMSZ], c2[ETACAL_SVG_NUMSZ], d[ETACAL_SVG_NUMSZ];
        fprintf(fp, "<tr%s><td class=\"n\">%s</td>", i == ti ? " style=\"font-weight:bold\"" : "", tgt(q->targets[i], a));
        fprintf(fp, "<td class=\"n\">%s (%zu/%zu)</td>", pct(p->n ? (double)p->hits / (double)p->n : NAN, 2, b), p->hits,
                p->n);
        fprintf(fp, "<td class=\"n\">%s\xE2\x80\x93%s</td>", pct(p->ci_lo, 2, c2), pct(p->ci_hi, 2, d));
        fprintf(fp, "<td class=\"n\">%s</td><td class=\"n\">%s</td>", num(p->mean_promise_s / 60, 2, a),
                num(p->mean_extra_s / 60, 2, b));
        if (isfinite(p->marginal_s_per_point))
            fprintf(fp, "<td class=\"n\">%s%s</td></tr>\n", p->marginal_s_per_point >= 0 ? "+" : "",
                    num(p->marginal_s_per_point / 60, 2, c2));
        else
            fputs("<td class=\"n\">\xE2\x80\x93</td></tr>\n", fp);
    }
    fputs("</tbody></table>\n<p class=\"note\">+min per point: the extra mean promise, in minutes, of one more "
          "point of on-time target, from the target before it on the grid.</p>\n",
          fp);
out:
    fputs("</section>\n", fp);
    free(x);
    free(y);
    return rc;
}

static int calibration(FILE *fp, const etacal_report *r, etacal_error *err)
{
    const etacal_quotes *q = r->q;
    const etacal_curve *cv = r->curve;
    size_t nt = q->ntargets, n = cv->pts[0].n;
    fputs("<section id=\"calibration\">\n<h2>Calibration on held-out orders</h2>\n", fp);
    int rc = ETACAL_OK;
    double *x = malloc(nt * sizeof *x), *y = malloc(nt * sizeof *y), *lo = malloc(nt * sizeof *lo),
           *hi = malloc(nt * sizeof *hi);
    if (!x || !y || !lo || !hi) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto out;
    }
    if (n == 0) {
        fputs("<p class=\"note\">No held-out rows.</p>\n", fp);
        goto out;
    }
    for (size_t i = 0; i < nt; i++) {
        size_t a, b;
        x[i] = q->targets[i] * 100;
        y[i] = 100.0 * (double)cv->pts[i].hits / (double)n;
        if ((rc = etacal_binom_range(q->targets[i], n, 0.95, &a, &b, err)) != 0)
            goto out;
        lo[i] = 100.0 * (double)a / (double)n;
        hi[i] = 100.0 * (double)b / (double)n;
    }
    fprintf(fp, "<p class=\"note\">For each level, the table fitted at that level promises the %zu held-out "
            "orders; a calibrated table puts its dot on the diagonal, inside the band where a binomial share "
            "on %zu orders falls 95%% of the time.</p>\n",
            n, n);
    etacal_svg_chart c;
    etacal_svg_layout lay = {0};
    lay.xsuffix = lay.ysuffix = "%";
    if ((rc = etacal_svg_begin(&c, fp, CHART_W, 420, 0, 100, 0, 100,
                               "Calibration: nominal level against the share of held-out orders on time", &lay,
                               err)) != 0)
        goto out;
    etacal_svg_axes(&c, "nominal level (target)", "share on time (held out)");
    etacal_svg_band(&c, x, lo, hi, nt, ETACAL_SVG_BAND);
    double d[2] = {0, 100};
    etacal_svg_line(&c, d, d, 2, ETACAL_SVG_REF);
    etacal_svg_markers(&c, x, y, nt, ETACAL_SVG_MAIN, 3);
    static const char *const ll[] = {"observed share", "diagonal (perfect)", "95% binomial band"};
    static const int ls[] = {ETACAL_SVG_MAIN, ETACAL_SVG_REF, ETACAL_SVG_BAND}, lk[] = {2, 0, 1};
    etacal_svg_legend(&c, ll, ls, lk, 3);
    etacal_svg_end(&c);
    /* the same as distances from the diagonal, where the band can be seen */
    double dlo = 0, dhi = 0;
    for (size_t i = 0; i < nt; i++) {
        y[i] -= x[i];
        lo[i] -= x[i];
        hi[i] -= x[i];
        dlo = fmin(dlo, fmin(y[i], lo[i]));
        dhi = fmax(dhi, fmax(y[i], hi[i]));
    }
    fputs("<p class=\"note\">The same, as the distance from the diagonal in percentage points: above 0 the "
          "promises keep more than they claim, below 0 less.</p>\n",
          fp);
    lay.ysuffix = NULL;
    if ((rc = etacal_svg_begin(&c, fp, CHART_W, 260, 0, 100, dlo, dhi,
                               "Calibration: observed minus nominal share in percentage points", &lay, err)) != 0)
        goto out;
    etacal_svg_axes(&c, "nominal level (target)", "observed \xE2\x88\x92 nominal (points)");
    etacal_svg_band(&c, x, lo, hi, nt, ETACAL_SVG_BAND);
    etacal_svg_hline(&c, 0, ETACAL_SVG_REF, NULL);
    etacal_svg_markers(&c, x, y, nt, ETACAL_SVG_MAIN, 3);
    etacal_svg_legend(&c, ll, ls, lk, 3);
    etacal_svg_end(&c);
out:
    fputs("</section>\n", fp);
    free(x);
    free(y);
    free(lo);
    free(hi);
    return rc;
}

typedef struct {
    size_t s;   /* curve segment */
    double rate;
} seg_rank;

static int by_rate(const void *a, const void *b)
{
    const seg_rank *x = a, *y = b;
    if (x->rate != y->rate)
        return (x->rate > y->rate) - (x->rate < y->rate);
    return (x->s > y->s) - (x->s < y->s);
}

static int segments(FILE *fp, const etacal_report *r, etacal_error *err)
{
    const etacal_quotes *q = r->q;
    const etacal_curve *cv = r->curve;
    size_t nt = q->ntargets, ti = r->target;
    fputs("<section id=\"segments\">\n<h2>On time per segment (held out)</h2>\n", fp);
    if (q->nkeys == 0 || cv->nsegs < 2) {
        fputs("<p class=\"note\">No segments (no --by columns, or no held-out row in any segment).</p>\n</section>\n",
              fp);
        return ETACAL_OK;
    }
    size_t ns = cv->nsegs - 1;
    seg_rank *rk = malloc(ns * sizeof *rk);
    double *x = malloc(MAX_SEG_SHOWN * sizeof *x * 5);
    char (*labs)[LABEL_CHARS * 4 + 8] = malloc(MAX_SEG_SHOWN * sizeof *labs);
    const char **lp = malloc(MAX_SEG_SHOWN * sizeof *lp);
    char (*tips)[800] = malloc(MAX_SEG_SHOWN * sizeof *tips);
    const char **tp = malloc(MAX_SEG_SHOWN * sizeof *tp);
    int rc = ETACAL_OK;
    if (!rk || !x || !labs || !lp || !tips || !tp) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
        goto out;
    }
    for (size_t i = 0; i < ns; i++) {
        const etacal_curve_point *p = &cv->pts[(i + 1) * nt + ti];
        rk[i].s = i + 1;
        rk[i].rate = (double)p->hits / (double)p->n;
    }
    qsort(rk, ns, sizeof *rk, by_rate);
    /* the lowest and the highest when there are too many to show */
    size_t shown = ns > MAX_SEG_SHOWN ? MAX_SEG_SHOWN : ns, half = MAX_SEG_SHOWN / 2;
    double *pos = x, *rate = x + MAX_SEG_SHOWN, *lo = x + 2 * MAX_SEG_SHOWN, *hi = x + 3 * MAX_SEG_SHOWN,
           *thin = x + 4 * MAX_SEG_SHOWN;
    double xmin = q->targets[ti] * 100, xmax = xmin;
    size_t nthin = 0;
    for (size_t k = 0; k < shown; k++) {
        size_t i = ns > MAX_SEG_SHOWN && k >= half ? ns - MAX_SEG_SHOWN + k : k;
        size_t s = rk[i].s;
        const etacal_curve_point *p = &cv->pts[s * nt + ti];
        char full[512];
        seg_label(q, cv->seg[s], full, sizeof full);
        int is_thin = p->n < r->thin;
        etacal_svg_truncate(full, LABEL_CHARS, labs[k], sizeof labs[k] - 8);
        if (is_thin)
            strcat(labs[k], " (thin)");
        lp[k] = labs[k];
        pos[k] = (double)(shown - k); /* the lowest on top */
        rate[k] = rk[i].rate * 100;
        lo[k] = p->ci_lo * 100;
        hi[k] = p->ci_hi * 100;
        thin[k] = is_thin ? rate[k] : NAN;
        {
            char a[ETACAL_SVG_NUMSZ], b[ETACAL_SVG_NUMSZ], d[ETACAL_SVG_NUMSZ];
            snprintf(tips[k], sizeof tips[k], "%s: %s on time (%zu/%zu), 95%% CI %s\xE2\x80\x93%s", full,
                     pct(rk[i].rate, 2, a), p->hits, p->n, pct(p->ci_lo, 2, b), pct(p->ci_hi, 2, d));
            tp[k] = tips[k];
        }
        if (is_thin) {
            rate[k] = NAN;
            nthin++;
        }
        xmin = fmin(xmin, lo[k]);
        xmax = fmax(xmax, hi[k]);
    }
    char tb[ETACAL_SVG_NUMSZ];
    fprintf(fp, "<p class=\"note\">Each segment's share of held-out orders on time with its promise at %s, "
            "with its Wilson 95%% interval; sorted from the lowest. A segment with fewer than %zu held-out "
            "orders is marked thin (hollow dot): its interval is wide and says little.",
            tgt(q->targets[ti], tb), r->thin);
    if (ns > MAX_SEG_SHOWN)
        fprintf(fp, " Of %zu segments, the %zu lowest and %zu highest are shown.", ns, half, half);
    fputs("</p>\n", fp);
    size_t lw = 0;
    for (size_t k = 0; k < shown; k++) {
        size_t w = etacal_svg_width(lp[k]);
        lw = w > lw ? w : lw;
    }
    etacal_svg_chart c;
    etacal_svg_layout lay = {0};
    lay.left_margin = (double)lw * 7 + 16;
    lay.ypos = pos;
    lay.ylab = lp;
    lay.nypos = shown;
    lay.xsuffix = "%";
    double height = 34 + 46 + 18.0 * (double)shown + 10;
    if ((rc = etacal_svg_begin(&c, fp, CHART_W, height, xmin, xmax, 0.5, (double)shown + 0.5,
                               "On-time rate per segment with Wilson 95% intervals against the target", &lay, err)) !=
        0)
        goto out;
    etacal_svg_axes(&c, "on time, held-out orders", NULL);
    etacal_svg_vline(&c, q->targets[ti] * 100, ETACAL_SVG_ALT, NULL);
    if (ns > MAX_SEG_SHOWN) /* where the segments left out would be */
        etacal_svg_hline(&c, (double)(shown - half) + 0.5, ETACAL_SVG_REF, NULL);
    /* error bars are horizontal here: etacal_svg_errbars takes the y positions */
    etacal_svg_errbars(&c, pos, lo, hi, shown, ETACAL_SVG_MAIN, 1);
    etacal_svg_markers_titled(&c, rate, pos, shown, ETACAL_SVG_MAIN, 3.5, tp);
    etacal_svg_markers_titled(&c, thin, pos, shown, ETACAL_SVG_MUTED, 3.5, tp);
    static const char *const ll[] = {"on-time rate and 95% CI", "target", "thin segment"};
    static const int ls[] = {ETACAL_SVG_MAIN, ETACAL_SVG_ALT, ETACAL_SVG_MUTED}, lk[] = {2, 0, 2};
    etacal_svg_legend(&c, ll, ls, lk, nthin ? 3 : 2);
    etacal_svg_end(&c);
    /* the segments to act on, as text: the whole interval below the target */
    size_t nbelow = 0;
    for (size_t i = 0; i < ns; i++) {
        const etacal_curve_point *p = &cv->pts[rk[i].s * nt + ti];
        if (p->ci_hi < q->targets[ti] && nbelow++ == 0)
            fputs("<table><thead><tr><th>segment below the target</th><th class=\"n\">held-out n</th>"
                  "<th class=\"n\">on time</th><th class=\"n\">95% CI</th></tr></thead>\n<tbody>\n",
                  fp);
        if (!(p->ci_hi < q->targets[ti]))
            continue;
        char full[512], a[ETACAL_SVG_NUMSZ], b[ETACAL_SVG_NUMSZ], d[ETACAL_SVG_NUMSZ];
        seg_label(q, cv->seg[rk[i].s], full, sizeof full);
        fputs("<tr><td>", fp);
        esc(fp, full);
        fprintf(fp, "</td><td class=\"n\">%zu</td><td class=\"n\">%s (%zu/%zu)</td><td class=\"n\">%s\xE2\x80\x93%s</td></tr>\n",
                p->n, pct((double)p->hits / (double)p->n, 2, a), p->hits, p->n, pct(p->ci_lo, 2, b), pct(p->ci_hi, 2, d));
    }
    if (nbelow)
        fputs("</tbody></table>\n", fp);
    else
        fprintf(fp, "<p class=\"note\">No segment's 95%% interval lies wholly below the target.</p>\n");
out:
    fputs("</section>\n", fp);
    free(rk);
    free(x);
    free(labs);
    free(lp);
    free(tips);
    free(tp);
    return rc;
}

/* Index of s in the list, adding it (up to max). */
static size_t find_add(const char **list, size_t *n, size_t max, const char *s)
{
    for (size_t i = 0; i < *n; i++)
        if (strcmp(list[i], s) == 0)
            return i;
    if (*n >= max)
        return SIZE_MAX;
    list[*n] = s;
    return (*n)++;
}

static int cmp_str(const void *a, const void *b) { return strcmp(*(const char *const *)a, *(const char *const *)b); }

static int buffer_grid(FILE *fp, const etacal_report *r, etacal_error *err)
{
    const etacal_quotes *q = r->q;
    size_t ti = r->target;
    int ratio = q->method == ETACAL_METHOD_RATIO;
    fputs("<section id=\"grid\">\n<h2>Buffers by segment</h2>\n", fp);
    if (q->nkeys == 0) {
        fputs("<p class=\"note\">One global buffer (no --by columns): see the table below.</p>\n</section>\n", fp);
        return ETACAL_OK;
    }
    int two = q->nkeys >= 2;
    size_t want = two ? 2 : 1;
    const char *rows[MAX_GRID_ROWS], *cols[MAX_GRID_COLS];
    size_t nr = 0, nc = 0, dropped = 0;
    for (size_t g = 1; g < q->nsegs; g++) {
        if (q->segs[g].level != want)
            continue;
        if (find_add(rows, &nr, MAX_GRID_ROWS, q->segs[g].keys[0]) == SIZE_MAX ||
            (two && find_add(cols, &nc, MAX_GRID_COLS, q->segs[g].keys[1]) == SIZE_MAX))
            dropped++;
    }
    if (!two)
        cols[nc++] = "all";
    qsort(rows, nr, sizeof *rows, cmp_str);
    qsort(cols, nc, sizeof *cols, cmp_str);
    size_t cells = nr * nc;
    double *v = malloc((cells > 0 ? cells : 1) * sizeof *v);
    unsigned char *mark = calloc(cells > 0 ? cells : 1, 1);
    etacal_quote_index *ix = NULL;
    int irc = v && mark ? etacal_quote_index_create(q, &ix, err) : ETACAL_ENOMEM;
    if (irc) {
        free(v);
        free(mark);
        return irc == ETACAL_ENOMEM ? etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory") : irc;
    }
    for (size_t i = 0; i < nr * nc; i++)
        v[i] = NAN;
    size_t nmark = 0;
    for (size_t g = 1; g < q->nsegs; g++) {
        if (q->segs[g].level != want)
            continue;
        size_t i = SIZE_MAX, j = two ? SIZE_MAX : 0;
        for (size_t a = 0; a < nr; a++)
            if (strcmp(rows[a], q->segs[g].keys[0]) == 0)
                i = a;
        for (size_t b = 0; two && b < nc; b++)
            if (strcmp(cols[b], q->segs[g].keys[1]) == 0)
                j = b;
        if (i == SIZE_MAX || j == SIZE_MAX)
            continue;
        size_t up = applied(ix, q, g, ti);
        double s = q->segs[up].score_q[ti];
        v[i * nc + j] = ratio ? s : s / 60;
        if (up != g) {
            mark[i * nc + j] = 1;
            nmark++;
        }
    }
    char tb[ETACAL_SVG_NUMSZ];
    fprintf(fp, "<p class=\"note\">%s at %s for each ", ratio ? "The factor applied to the prediction" :
            q->method == ETACAL_METHOD_QR ? "The conformal correction (minutes) added to the regression" :
            "The buffer in minutes added to the prediction", tgt(q->targets[ti], tb));
    esc(fp, q->key_names[0]);
    if (two) {
        fputs(" (rows) and ", fp);
        esc(fp, q->key_names[1]);
        fputs(" (columns)", fp);
    }
    fputs(", darker for more. ", fp);
    if (nmark)
        fputs("* marks a cell too thin for a buffer of its own: it is pooled with the other thin cells of its row (or, when those are too few, of the whole table) and uses their buffer. ", fp);
    fputs("\xE2\x80\x93: no calibration rows.", fp);
    if (dropped)
        fprintf(fp, " %zu segments beyond the first %d rows and %d columns are not drawn.", dropped, MAX_GRID_ROWS,
                MAX_GRID_COLS);
    fputs("</p>\n", fp);
    etacal_svg_heat(fp, "Buffers by segment", rows, nr, cols, nc, v, mark, ratio ? 3 : 1);
    etacal_quote_index_destroy(ix);
    free(v);
    free(mark);
    fputs("</section>\n", fp);
    return ETACAL_OK;
}

static int backtest(FILE *fp, const etacal_report *r, etacal_error *err)
{
    if (!r->time_name)
        return ETACAL_OK;
    char tb[ETACAL_SVG_NUMSZ], a[ETACAL_SVG_NUMSZ], b[ETACAL_SVG_NUMSZ], ov[ETACAL_SVG_NUMSZ];
    tgt(r->q->targets[r->target], tb);
    fputs("<section id=\"backtest\">\n<h2>Backtest: on time per period</h2>\n", fp);
    const etacal_backtest_result *bt = r->bt;
    if (!bt || bt->nperiods == 0) {
        fputs("<p class=\"note\">No backtest: ", fp);
        esc(fp, r->bt_note ? r->bt_note : "no period to replay");
        fputs(".</p>\n</section>\n", fp);
        return ETACAL_OK;
    }
    size_t np = bt->nperiods, used = 0;
    double *mx = malloc(np * 7 * sizeof *mx);
    if (!mx)
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    double *my = mx + np, *lo = mx + 2 * np, *hi = mx + 3 * np, *ux = mx + 4 * np, *uy = mx + 5 * np,
           *ny = mx + 6 * np;
    double ymin = r->q->targets[r->target] * 100, ymax = ymin;
    for (size_t k = 0; k < np; k++) {
        const etacal_backtest_period *p = &bt->periods[k];
        mx[k] = my[k] = lo[k] = hi[k] = ux[k] = uy[k] = ny[k] = NAN;
        if (p->n == 0)
            continue;
        if (p->promise != ETACAL_BT_FINITE) {
            /* an unbounded promise keeps every order (100%), none keeps
             * none (0%): drawn as their own markers, off the line and
             * without an interval, since no table made them */
            ux[k] = (p->start + p->end) / 2;
            if (p->promise == ETACAL_BT_UNBOUNDED)
                uy[k] = 100;
            else
                ny[k] = 0;
            ymin = fmin(ymin, p->promise == ETACAL_BT_UNBOUNDED ? 100 : 0);
            ymax = fmax(ymax, p->promise == ETACAL_BT_UNBOUNDED ? 100 : 0);
            continue;
        }
        etacal_error e;
        double l, h;
        if (etacal_binom_wilson(p->hits, p->n, 0.95, &l, &h, &e) != ETACAL_OK)
            continue;
        mx[k] = (p->start + p->end) / 2;
        my[k] = 100.0 * (double)p->hits / (double)p->n;
        lo[k] = l * 100;
        hi[k] = h * 100;
        ymin = fmin(ymin, lo[k]);
        ymax = fmax(ymax, hi[k]);
        used++;
    }
    double ol = NAN, oh = NAN;
    etacal_error e;
    if (bt->n)
        etacal_binom_wilson(bt->hits, bt->n, 0.95, &ol, &oh, &e);
    char ev[ETACAL_SVG_NUMSZ + 8], wi[ETACAL_SVG_NUMSZ + 8];
    duration(r->bt_every_s, ev);
    duration(r->bt_window_s, wi);
    fprintf(fp, "<p class=\"note\">Rolling origin: before each period of %s, a table fitted on the %s "
            "before it promised the period's orders, as a nightly job would have. Overall %s on time "
            "(%zu/%zu, 95%% CI %s\xE2\x80\x93%s) for a target of %s; %zu of %zu periods had a table.",
            ev, wi, pct(bt->n ? (double)bt->hits / (double)bt->n : NAN, 2, ov), bt->hits, bt->n,
            pct(ol, 2, a), pct(oh, 2, b), tb, used, np);
    fputs(" Each table was calibrated only on the orders delivered by the period start.", fp);
    if (bt->unbounded_periods)
        fprintf(fp, " %zu periods had too few delivered orders in their window for a finite promise: "
                    "their promise was unbounded and their %zu orders count as on time (triangles).",
                bt->unbounded_periods, bt->unbounded_n);
    if (bt->none_periods)
        fprintf(fp, " %zu periods had no promise and their %zu orders count as late (diamonds).", bt->none_periods,
                bt->none_n);
    fputs("</p>\n", fp);
    int rc = ETACAL_OK;
    if (used + bt->unbounded_periods + bt->none_periods == 0)
        goto out;
    /* date ticks at midnights (UTC), a whole number of days apart, as many as fit */
    double t0 = bt->periods[0].start, t1 = bt->periods[np - 1].end;
    double plotw = CHART_W - 64 - 18;
    static const double steps[] = {1, 2, 7, 14, 28, 56, 91, 182, 364, 728};
    double step = steps[sizeof steps / sizeof *steps - 1];
    for (size_t i = 0; i < sizeof steps / sizeof *steps; i++)
        if ((t1 - t0) / (steps[i] * 86400) <= plotw / 56) {
            step = steps[i];
            break;
        }
    double tpos[64];
    char tl[64][8];
    const char *tlp[64];
    size_t nticks = 0;
    for (double d = ceil(t0 / 86400) * 86400; d <= t1 && nticks < 64; d += step * 86400) {
        char buf[32];
        etacal_time_format(d, buf);
        tpos[nticks] = d;
        memcpy(tl[nticks], buf + 5, 5); /* MM-DD */
        tl[nticks][5] = '\0';
        tlp[nticks] = tl[nticks];
        nticks++;
    }
    if (nticks < 2) {
        /* less than two days: ticks at whole hours, labelled hh:mm */
        static const double hsteps[] = {1, 2, 3, 6, 12, 24};
        double hs = 24;
        for (size_t i = 0; i < sizeof hsteps / sizeof *hsteps; i++)
            if ((t1 - t0) / (hsteps[i] * 3600) <= plotw / 56) {
                hs = hsteps[i];
                break;
            }
        nticks = 0;
        for (double d = ceil(t0 / (hs * 3600)) * hs * 3600; d <= t1 && nticks < 64; d += hs * 3600) {
            char buf[32];
            etacal_time_format(d, buf);
            tpos[nticks] = d;
            memcpy(tl[nticks], buf + 11, 5); /* hh:mm */
            tl[nticks][5] = '\0';
            tlp[nticks] = tl[nticks];
            nticks++;
        }
    }
    etacal_svg_chart c;
    etacal_svg_layout lay = {0};
    lay.xpos = tpos;
    lay.xlab = tlp;
    lay.nxpos = nticks;
    lay.ysuffix = "%";
    char year[32], xt[64];
    etacal_time_format(t0, year);
    year[4] = '\0';
    snprintf(xt, sizeof xt, "period (UTC dates, %s)", year);
    if ((rc = etacal_svg_begin(&c, fp, CHART_W, 340, t0, t1, ymin, ymax,
                               "Backtest: on-time rate per period against the target", &lay, err)) != 0)
        goto out;
    etacal_svg_axes(&c, xt, "on time in the period");
    etacal_svg_hline(&c, r->q->targets[r->target] * 100, ETACAL_SVG_ALT, NULL);
    etacal_svg_errbars(&c, mx, lo, hi, np, ETACAL_SVG_MUTED, 0);
    etacal_svg_line(&c, mx, my, np, ETACAL_SVG_MAIN);
    etacal_svg_markers(&c, mx, my, np, ETACAL_SVG_MAIN, 3);
    const char *ll[5] = {"on-time rate", "Wilson 95% CI", "target"};
    int ls[5] = {ETACAL_SVG_MAIN, ETACAL_SVG_MUTED, ETACAL_SVG_ALT}, lk[5] = {0, 0, 0};
    size_t nl = 3;
    if (bt->unbounded_periods) {
        etacal_svg_markers(&c, ux, uy, np, ETACAL_SVG_REF, 4);
        ll[nl] = "unbounded promise";
        ls[nl] = ETACAL_SVG_REF;
        lk[nl++] = 2;
    }
    if (bt->none_periods) {
        etacal_svg_markers(&c, ux, ny, np, ETACAL_SVG_GOOD, 4);
        ll[nl] = "no promise";
        ls[nl] = ETACAL_SVG_GOOD;
        lk[nl++] = 2;
    }
    etacal_svg_legend(&c, ll, ls, lk, nl);
    etacal_svg_end(&c);
out:
    fputs("</section>\n", fp);
    free(mx);
    return rc;
}

static int residuals(FILE *fp, const etacal_report *r, etacal_error *err)
{
    const etacal_report_hist *h = r->hist;
    const etacal_quotes *q = r->q;
    size_t ti = r->target;
    fputs("<section id=\"residuals\">\n<h2>How late the bare prediction is</h2>\n", fp);
    if (!h || h->nbins == 0) {
        fputs("<p class=\"note\">No residuals.</p>\n</section>\n", fp);
        return ETACAL_OK;
    }
    size_t nb = h->nbins;
    double *e = malloc((nb + 1) * sizeof *e), *hh = malloc(nb * sizeof *hh);
    if (!e || !hh) {
        free(e);
        free(hh);
        return etacal_error_set(err, ETACAL_ENOMEM, NULL, "out of memory");
    }
    double top = 0;
    for (size_t i = 0; i <= nb; i++)
        e[i] = h->edges[i] / 60;
    for (size_t i = 0; i < nb; i++) {
        hh[i] = (double)h->counts[i];
        top = fmax(top, hh[i]);
    }
    char a[ETACAL_SVG_NUMSZ], b[ETACAL_SVG_NUMSZ], tb[ETACAL_SVG_NUMSZ];
    fprintf(fp, "<p class=\"note\">Actual minus predicted duration of the %zu orders the table is fitted on, "
            "in bins of %s min; %zu below %s min and %zu above %s min are not drawn. Orders right of 0 arrive "
            "after the bare prediction.</p>\n",
            h->n, num(e[1] - e[0], 2, tb), h->below, num(e[0], 1, a), h->above, num(e[nb], 1, b));
    etacal_svg_chart c;
    int rc = etacal_svg_begin(&c, fp, CHART_W, 340, e[0], e[nb], 0, top > 0 ? top : 1,
                              "Histogram of actual minus predicted minutes", NULL, err);
    if (rc)
        goto out;
    etacal_svg_axes(&c, "actual \xE2\x88\x92 prediction (minutes)", "orders");
    etacal_svg_bars(&c, e, hh, nb, ETACAL_SVG_BAND);
    etacal_svg_vline(&c, 0, ETACAL_SVG_REF, NULL);
    int marked = 0;
    if (q->method == ETACAL_METHOD_ADD && isfinite(q->segs[0].score_q[ti])) {
        char lab[192];
        snprintf(lab, sizeof lab, "global buffer at %s: %s min", tgt(q->targets[ti], tb),
                 num(q->segs[0].score_q[ti] / 60, 1, a));
        etacal_svg_vline(&c, q->segs[0].score_q[ti] / 60, ETACAL_SVG_ALT, lab);
        marked = 1;
    }
    static const char *const ll[] = {"orders", "on time with the bare prediction (0)", "buffer"};
    static const int ls[] = {ETACAL_SVG_BAND, ETACAL_SVG_REF, ETACAL_SVG_ALT}, lk[] = {1, 0, 0};
    etacal_svg_legend(&c, ll, ls, lk, marked ? 3 : 2);
    etacal_svg_end(&c);
    if (!marked)
        fputs("<p class=\"note\">Method ratio or qr: the promise is not the prediction plus one buffer, so no "
              "single buffer is marked.</p>\n",
              fp);
out:
    fputs("</section>\n", fp);
    free(e);
    free(hh);
    return rc;
}

static void quote_table(FILE *fp, const etacal_report *r)
{
    const etacal_quotes *q = r->q;
    size_t ti = r->target;
    char tb[ETACAL_SVG_NUMSZ], a[ETACAL_SVG_NUMSZ];
    fprintf(fp, "<section id=\"table\">\n<h2>The quote table at %s</h2>\n", tgt(q->targets[ti], tb));
    fputs("<p class=\"note\">One row per segment with enough rows of its own; an order takes the most specific "
          "row that matches it. promise_s = offset_s + slope \xC3\x97 prediction",
          fp);
    if (q->ncoef)
        fputs(q->ranges ? " + the coefficients \xC3\x97 covariates, each covariate clamped into the range its row "
                          "was fitted on (min\xE2\x80\x93max)"
                        : " + the coefficients \xC3\x97 covariates",
              fp);
    fputs(", never below 0", fp);
    fprintf(fp, ". Fitted on the %zu rows not held out.</p>\n<table><thead><tr>", r->fitted);
    for (size_t j = 0; j < q->nkeys; j++) {
        fputs("<th>", fp);
        esc(fp, q->key_names[j]);
        fputs("</th>", fp);
    }
    if (!q->nkeys)
        fputs("<th>segment</th>", fp);
    fputs("<th class=\"n\">n</th><th class=\"n\">k</th><th class=\"n\">offset_s</th><th class=\"n\">slope</th>", fp);
    for (size_t j = 0; j < q->ncoef; j++) {
        fputs("<th class=\"n\">coef_", fp);
        esc(fp, q->coef_names[j]);
        fputs("</th>", fp);
    }
    for (size_t j = 0; j < q->ncoef && q->ranges; j++) {
        fputs("<th class=\"n\">", fp);
        esc(fp, q->coef_names[j]);
        fputs(" min\xE2\x80\x93max</th>", fp);
    }
    if (q->method == ETACAL_METHOD_ADD)
        fputs("<th class=\"n\">buffer min</th>", fp);
    fputs("</tr></thead>\n<tbody>\n", fp);
    for (size_t i = 0; i < q->nrows; i++) {
        const etacal_quote *row = &q->rows[i];
        if (row->target != ti)
            continue;
        fputs("<tr>", fp);
        for (size_t j = 0; j < q->nkeys; j++) {
            fputs("<td>", fp);
            esc(fp, q->segs[row->seg].keys[j]);
            fputs("</td>", fp);
        }
        if (!q->nkeys)
            fputs("<td>*</td>", fp);
        char o[ETACAL_NUM_BUFSZ], s[ETACAL_NUM_BUFSZ];
        etacal_num_format(row->offset_s, o);
        etacal_num_format(row->slope, s);
        fprintf(fp, "<td class=\"n\">%zu</td><td class=\"n\">%zu</td><td class=\"n\">%s</td><td class=\"n\">%s</td>",
                row->n, row->k, o, s);
        for (size_t j = 0; j < q->ncoef; j++) {
            etacal_num_format(row->coef[j], o);
            fprintf(fp, "<td class=\"n\">%s</td>", o);
        }
        for (size_t j = 0; j < q->ncoef && row->x_min; j++) {
            etacal_num_format(row->x_min[j], o);
            etacal_num_format(row->x_max[j], s);
            fprintf(fp, "<td class=\"n\">%s\xE2\x80\x93%s</td>", o, s);
        }
        if (q->method == ETACAL_METHOD_ADD)
            fprintf(fp, "<td class=\"n\">%s</td>", num(row->offset_s / 60, 2, a));
        fputs("</tr>\n", fp);
    }
    fputs("</tbody></table>\n</section>\n", fp);
}

static int write_html(FILE *fp, const etacal_report *r, etacal_error *err)
{
    const etacal_quotes *q = r->q;
    if (!q || !r->ho || !r->curve || !r->stats || r->target >= q->ntargets)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the report lacks its quote table or its target");
    if (r->ho->nsegs != q->nsegs || r->ho->ntargets != q->ntargets || r->curve->ntargets != q->ntargets ||
        r->curve->nsegs == 0)
        return etacal_error_set(err, ETACAL_EINVAL, NULL, "the held-out counts are not those of this quote table");
    const char *title = r->title ? r->title : "Promise report";
    fputs("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
          "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<meta name=\"generator\" "
          "content=\"etacal " ETACAL_VERSION "\">\n<title>",
          fp);
    esc(fp, title);
    fputs("</title>\n", fp);
    fputs(css, fp);
    fputs("</head>\n<body>\n<main>\n<h1>", fp);
    esc(fp, title);
    char tb[ETACAL_SVG_NUMSZ];
    fputs("</h1>\n<p class=\"sub\">", fp);
    esc(fp, r->source ? r->source : "");
    fprintf(fp, " \xC2\xB7 method %s \xC2\xB7 target %s on time</p>\n", etacal_method_name(q->method),
            tgt(q->targets[r->target], tb));
    int rc;
    headline(fp, r);
    if ((rc = cost_curve(fp, r, err)) != 0 || (rc = calibration(fp, r, err)) != 0 || (rc = segments(fp, r, err)) != 0 ||
        (rc = buffer_grid(fp, r, err)) != 0 || (rc = backtest(fp, r, err)) != 0 || (rc = residuals(fp, r, err)) != 0)
        return rc;
    quote_table(fp, r);
    fputs("<section id=\"command\">\n<h2>How this page was made</h2>\n<pre>", fp);
    esc(fp, r->command ? r->command : "");
    fputs("</pre>\n<p class=\"note\">etacal " ETACAL_VERSION ". The same command on the same input writes the "
          "same page.</p>\n</section>\n</main>\n</body>\n</html>\n",
          fp);
    return ferror(fp) ? etacal_error_set(err, ETACAL_EIO, NULL, "cannot write the report") : ETACAL_OK;
}

int etacal_report_write(const etacal_report *r, const etacal_sink *out, etacal_error *err)
{
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    return sink_fclose(fp, write_html(fp, r, err), err);
}
