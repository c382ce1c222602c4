/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_report.c: the report as one library run (etacal_report_csv,
 * etacal_report_table).  On seeded rows: the page parses (Python's
 * html.parser for the nesting and xml.etree for every inline SVG part, run
 * through /usr/bin/python3; skipped with a notice without it) with the
 * page's own sections; its quote table holds the numbers of etacal_fit_csv
 * on the same specification, printed as the page prints them, and its
 * headline the held-out counts of that run; two calls write the same bytes,
 * and a run on the same rows from memory the same page; a level of the
 * charts that cannot be fitted and a span shorter than the backtest window
 * come back as notes; the errors (a target that cannot be fitted, a missing
 * column, a specification a report does not take) leave nothing at the
 * output path and an existing file there untouched.
 *
 * The rows are invented (seeded); the numbers are compared with the fit run
 * of fit.h, which test_fit.c and tests/ref check against outside sources. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>
#include <unistd.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "svg.h"
#include "testutil.h"

/* The report to a file that appears whole or not at all, as a program
 * writing one would: the library's output file, committed on success. */
static int report_to(const etacal_report_spec *s, const char *in, const etacal_table *t, const char *path,
                     etacal_report_notes *notes, etacal_error *err)
{
    etacal_outfile *of = NULL;
    int rc = etacal_outfile_open(path, &of, err);
    if (rc == 0)
        rc = in ? etacal_report_csv(s, in, NULL, etacal_outfile_sink(of), notes, err)
                : etacal_report_table(s, t, etacal_outfile_sink(of), notes, err);
    if (rc == 0)
        rc = etacal_outfile_commit(of, err);
    etacal_outfile_destroy(of);
    return rc;
}

#define NROWS 2400
#define PYTHON "/usr/bin/python3"

static double actual[NROWS], pred[NROWS], when[NROWS];
static const char *zone[NROWS];
static tu_dir dir;
static char rows_csv[600];

/* Seeded rows: three zones with their own lateness, one row every 10
 * minutes (16.7 days), written as CSV and kept as arrays. */
static int setup(void **state)
{
    (void)state;
    static const char *const zones[] = {"harbour", "old town", "docklands"};
    tu_rng g = {UINT64_C(0x5eed2e9)};
    tu_dir_make(&dir);
    tu_path(rows_csv, sizeof rows_csv, &dir, "rows.csv");
    FILE *fp = fopen(rows_csv, "wb");
    if (!fp)
        return -1;
    fprintf(fp, "actual_s,pred_s,zone,placed\n");
    for (size_t i = 0; i < NROWS; i++) {
        size_t z = tu_below(&g, 3);
        pred[i] = 600 + 1800 * tu_unif(&g);
        actual[i] = pred[i] + (250.5 + 120 * (double)z) * (tu_unif(&g) + tu_unif(&g) - 0.7);
        if (actual[i] < 0)
            actual[i] = 31.25;
        zone[i] = zones[z];
        when[i] = 1767225600 + 600 * (double)i;
        fprintf(fp, "%.17g,%.17g,%s,%.17g\n", actual[i], pred[i], zone[i], when[i]);
    }
    return fclose(fp) == 0 ? 0 : -1;
}

static int teardown(void **state)
{
    (void)state;
    tu_dir_remove(&dir);
    return 0;
}

static const char *const keys[] = {"zone"};

static void spec_of(etacal_report_spec *s, const double *target)
{
    etacal_report_spec_init(s);
    s->fit.actual = "actual_s";
    s->fit.pred = "pred_s";
    s->fit.keys = keys;
    s->fit.nkeys = 1;
    s->fit.targets = target;
    s->fit.ntargets = 1;
    s->fit.min_rows = 150;
    s->fit.holdout = 0.25;
    s->fit.time = "placed";
    s->window_s = 4 * 86400.0;
    s->every_s = 86400.0;
    s->title = "Harbour & docks";
    s->command = "etacal report rows.csv --by zone";
}

static char *page_of(const char *name, size_t *len)
{
    char path[600];
    tu_path(path, sizeof path, &dir, name);
    char *s = tu_read_file(path, len);
    assert_non_null(s);
    return s;
}

static int exists(const char *name)
{
    char path[600];
    tu_path(path, sizeof path, &dir, name);
    return access(path, F_OK) == 0;
}

/* Files the output's temporary name leaves behind (PATH.tmp.XXXXXX). */
static int temporaries(void)
{
    DIR *dp = opendir(dir.path);
    assert_non_null(dp);
    int n = 0;
    struct dirent *de;
    while ((de = readdir(dp)) != NULL)
        n += strstr(de->d_name, ".tmp.") != NULL;
    closedir(dp);
    return n;
}

/* The page parsed by Python: "sections ...", "svg N" and one line per row
 * of the quote table (cells joined by tabs), or "FAIL ...".  Exit 77 when
 * the parsers are missing. */
static const char parse_py[] =
    "import html.parser, re, sys\n"
    "try:\n"
    "    import xml.etree.ElementTree as ET\n"
    "except ImportError:\n"
    "    sys.exit(77)\n"
    "VOID = {'meta', 'br'}\n"
    "class P(html.parser.HTMLParser):\n"
    "    def __init__(self):\n"
    "        super().__init__(convert_charrefs=True)\n"
    "        self.stack, self.sections, self.rows, self.cell, self.sec, self.bad = [], [], [], None, None, []\n"
    "    def handle_starttag(self, tag, attrs):\n"
    "        if tag == 'section':\n"
    "            self.sec = dict(attrs).get('id'); self.sections.append(self.sec)\n"
    "        if tag == 'tr' and self.sec == 'table':\n"
    "            self.rows.append([])\n"
    "        if tag in ('td', 'th') and self.sec == 'table':\n"
    "            self.cell = []\n"
    "        if tag not in VOID:\n"
    "            self.stack.append(tag)\n"
    "    def handle_endtag(self, tag):\n"
    "        if not self.stack or self.stack[-1] != tag:\n"
    "            self.bad.append(tag); return\n"
    "        self.stack.pop()\n"
    "        if tag in ('td', 'th') and self.cell is not None:\n"
    "            self.rows[-1].append(''.join(self.cell)); self.cell = None\n"
    "    def handle_data(self, d):\n"
    "        if self.cell is not None:\n"
    "            self.cell.append(d)\n"
    "doc = open(sys.argv[1], encoding='utf-8').read()\n"
    "p = P(); p.feed(doc); p.close()\n"
    "if p.bad or p.stack != []:\n"
    "    print('FAIL nesting', p.bad[:3], p.stack); sys.exit(0)\n"
    "svgs = re.findall(r'<svg\\b.*?</svg>', doc, re.S)\n"
    "for s in svgs:\n"
    "    try:\n"
    "        ET.fromstring(s)\n"
    "    except ET.ParseError as e:\n"
    "        print('FAIL svg', e); sys.exit(0)\n"
    "print('sections', ' '.join(p.sections))\n"
    "print('svg', len(svgs))\n"
    "for r in p.rows:\n"
    "    print('\\t'.join(r))\n";

/* Runs parse_py on the page; returns its output (to free), or NULL when
 * Python or its parsers are missing (the caller skips). */
static char *parse_page(const char *name)
{
    if (access(PYTHON, X_OK) != 0)
        return NULL;
    char script[600], page[600], cmd[2000];
    tu_path(script, sizeof script, &dir, "parse.py");
    tu_path(page, sizeof page, &dir, name);
    FILE *fp = fopen(script, "wb");
    assert_non_null(fp);
    fputs(parse_py, fp);
    assert_int_equal(fclose(fp), 0);
    snprintf(cmd, sizeof cmd, "%s '%s' '%s'", PYTHON, script, page);
    FILE *pp = popen(cmd, "r");
    assert_non_null(pp);
    size_t cap = 1 << 16, len = 0;
    char *out = malloc(cap);
    assert_non_null(out);
    size_t got;
    while ((got = fread(out + len, 1, cap - len - 1, pp)) > 0) {
        len += got;
        if (len + 1 == cap) {
            cap *= 2;
            out = realloc(out, cap);
            assert_non_null(out);
        }
    }
    out[len] = '\0';
    int st = pclose(pp);
    if (WIFEXITED(st) && WEXITSTATUS(st) == 77) {
        free(out);
        return NULL;
    }
    assert_true(WIFEXITED(st) && WEXITSTATUS(st) == 0);
    return out;
}

/* The page from the file: structure, the fit's numbers, same bytes twice. */
static void test_page_from_csv(void **state)
{
    (void)state;
    const double target = 0.9;
    etacal_report_spec s;
    spec_of(&s, &target);
    char out1[600], out2[600];
    tu_path(out1, sizeof out1, &dir, "r1.html");
    tu_path(out2, sizeof out2, &dir, "r2.html");
    etacal_report_notes notes;
    etacal_error err;
    assert_int_equal(report_to(&s, rows_csv, NULL, out1, &notes, &err), ETACAL_OK);
    assert_int_equal(notes.n, 0);
    assert_int_equal(report_to(&s, rows_csv, NULL, out2, &notes, &err), ETACAL_OK);
    size_t l1, l2;
    char *p1 = page_of("r1.html", &l1), *p2 = page_of("r2.html", &l2);
    assert_int_equal(l1, l2);
    assert_memory_equal(p1, p2, l1);
    assert_non_null(strstr(p1, "<title>Harbour &amp; docks</title>"));
    assert_non_null(strstr(p1, "<pre>etacal report rows.csv --by zone</pre>"));

    /* the fit run of fit.h on the same specification */
    etacal_fit_run *run = NULL;
    assert_int_equal(etacal_fit_csv(&s.fit, rows_csv, NULL, &run, &err), ETACAL_OK);
    const etacal_quotes *q = etacal_fit_run_quotes(run);
    const etacal_holdout *ho = etacal_fit_run_holdout(run);
    assert_int_equal(q->ntargets, 1);
    /* the headline's held-out counts: on time overall with the promise */
    char want[256];
    snprintf(want, sizeof want, "on time on %zu held-out orders with the promise (%zu/%zu)", ho->n[0], ho->hits[0],
             ho->n[0]);
    assert_non_null(strstr(p1, want));
    snprintf(want, sizeof want, "Fitted on the %zu rows not held out.",
             etacal_table_rows(etacal_fit_run_rows(run)) - etacal_fit_run_held(run));
    assert_non_null(strstr(p1, want));

    char *parsed = parse_page("r1.html");
    if (!parsed) {
        etacal_fit_run_destroy(run);
        free(p1);
        free(p2);
        print_message("SKIP test_report: %s with html.parser and xml.etree is missing; the page was not parsed\n",
                      PYTHON);
        skip();
    }
    if (strncmp(parsed, "FAIL", 4) == 0)
        fail_msg("the page does not parse: %s", parsed);
    const char *sections = "sections headline cost calibration segments grid backtest residuals table command\n";
    assert_memory_equal(parsed, sections, strlen(sections));
    const char *svg = strstr(parsed, "\nsvg ");
    assert_non_null(svg);
    assert_true(atoi(svg + 5) >= 5); /* the charts: cost, calibration, segments, backtest, residuals */
    /* the quote table: a header, then one row per segment at the target,
     * printed as the page prints them (etacal_num_format, etacal_svg_num) */
    char *line = strchr(svg + 1, '\n') + 1;
    const char *head = "zone\tn\tk\toffset_s\tslope\tbuffer min\n";
    assert_memory_equal(line, head, strlen(head));
    line += strlen(head);
    size_t rows = 0;
    for (size_t i = 0; i < q->nrows; i++) {
        const etacal_quote *r = &q->rows[i];
        char o[ETACAL_NUM_BUFSZ], sl[ETACAL_NUM_BUFSZ], bm[ETACAL_SVG_NUMSZ];
        etacal_num_format(r->offset_s, o);
        etacal_num_format(r->slope, sl);
        etacal_svg_num(r->offset_s / 60, 2, bm);
        char expect[400];
        int w = snprintf(expect, sizeof expect, "%s\t%zu\t%zu\t%s\t%s\t%s\n", r->seg ? q->segs[r->seg].keys[0] : "*",
                         r->n, r->k, o, sl, bm);
        if (strncmp(line, expect, (size_t)w) != 0)
            fail_msg("quote-table row %zu: the page has '%.*s', the fit '%s'", i, (int)strcspn(line, "\n"), line,
                     expect);
        line += w;
        rows++;
    }
    assert_true(rows >= 2); /* the global row and at least one zone */
    assert_string_equal(line, "");
    free(parsed);
    etacal_fit_run_destroy(run);
    free(p1);
    free(p2);
}

/* The same rows from memory, named as the file: the same page. */
static void test_page_from_memory(void **state)
{
    (void)state;
    const double target = 0.9;
    etacal_report_spec s;
    spec_of(&s, &target);
    etacal_colspec cols[ETACAL_FIT_MAX_COLS];
    size_t ncol = etacal_fitspec_columns(&s.fit, cols);
    assert_int_equal(ncol, 4);
    etacal_column_data data[4];
    memset(data, 0, sizeof data);
    data[0].num = actual;
    data[1].num = pred;
    data[2].str = zone;
    data[3].num = when;
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(etacal_table_from_arrays(cols, data, ncol, NROWS, rows_csv, ETACAL_TABLE_BORROW, &t, &err),
                     ETACAL_OK);
    char fout[600], mout[600];
    tu_path(fout, sizeof fout, &dir, "file.html");
    tu_path(mout, sizeof mout, &dir, "mem.html");
    assert_int_equal(report_to(&s, rows_csv, NULL, fout, NULL, &err), ETACAL_OK);
    assert_int_equal(report_to(&s, NULL, t, mout, NULL, &err), ETACAL_OK);
    size_t lf, lm;
    char *pf = page_of("file.html", &lf), *pm = page_of("mem.html", &lm);
    assert_int_equal(lf, lm);
    assert_memory_equal(pf, pm, lf);
    free(pf);
    free(pm);
    etacal_table_destroy(t);
}

/* What the CLI printed to stderr comes back as notes, and the page says it. */
static void test_notes(void **state)
{
    (void)state;
    const double target = 0.9;
    etacal_report_spec s;
    spec_of(&s, &target);
    char out[600];
    tu_path(out, sizeof out, &dir, "notes.html");
    etacal_report_notes notes;
    etacal_error err;
    /* a window longer than the 16.7 days of rows: no backtest */
    s.window_s = 30 * 86400.0;
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_OK);
    assert_int_equal(notes.n, 1);
    assert_string_equal(notes.text[0], "no backtest: the data span less than one window: nothing to backtest");
    size_t len;
    char *p = page_of("notes.html", &len);
    assert_non_null(strstr(p, "No backtest: the data span less than one window"));
    free(p);

    /* recency weights with a half-life of 5 h: the 1800 rows fitted on weigh
     * about 5 h / 10 min / ln 2 = 43 in all, enough for 0.9 (9) and
     * not for the curve's 0.99 (99): the chosen target alone, and a note */
    s.window_s = 4 * 86400.0;
    s.fit.half_life = 5 * 3600.0;
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_OK);
    assert_int_equal(notes.n, 1);
    const char *lead = "the levels of the cost curve and the calibration chart could not be fitted (the recency "
                       "weights of the 1800 rows add up to ";
    assert_memory_equal(notes.text[0], lead, strlen(lead));
    const char *tail = "); the page shows the chosen target only";
    size_t nl = strlen(notes.text[0]);
    assert_true(nl > strlen(tail));
    assert_string_equal(notes.text[0] + nl - strlen(tail), tail);
    p = page_of("notes.html", &len);
    assert_non_null(strstr(p, "<p class=\"warn\">Note: the levels of the cost curve"));
    free(p);
    /* the same without a place for notes or errors */
    assert_int_equal(report_to(&s, rows_csv, NULL, out, NULL, NULL), ETACAL_OK);
}

/* Errors: nothing at the output path, an existing file untouched. */
static void test_errors(void **state)
{
    (void)state;
    char out[600];
    tu_path(out, sizeof out, &dir, "err.html");
    etacal_report_notes notes;
    etacal_error err;
    char where[700];

    /* a target 1800 fitted rows cannot bound: rank ceil(1801 * 0.9995) = 1801 > 1800 */
    const double high = 0.9995;
    etacal_report_spec s;
    spec_of(&s, &high);
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_ENUM);
    assert_error(&err, ETACAL_ENUM, rows_csv,
                 "only 1800 rows: a promise for target 0.9995 needs at least 1999 calibration rows (rank "
                 "ceil((n+1)*tau) must not exceed n)");
    assert_false(exists("err.html"));
    assert_int_equal(notes.n, 0);
    assert_int_equal(report_to(&s, rows_csv, NULL, out, NULL, NULL), ETACAL_ENUM);
    assert_false(exists("err.html"));

    /* a key column the file lacks */
    const double target = 0.9;
    static const char *const nokey[] = {"district"};
    spec_of(&s, &target);
    s.fit.keys = nokey;
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, tu_where(where, sizeof where, rows_csv, 1),
                 "no column 'district' in the header");
    assert_false(exists("err.html"));

    /* the same on a table from memory: the run names the missing column */
    etacal_colspec cols[2] = {{"actual_s", ETACAL_COL_NUM, 0, NULL}, {"pred_s", ETACAL_COL_NUM, 0, NULL}};
    etacal_column_data data[2] = {{.num = actual}, {.num = pred}};
    etacal_table *t = NULL;
    assert_int_equal(etacal_table_from_arrays(cols, data, 2, NROWS, "frame", 0, &t, &err), ETACAL_OK);
    spec_of(&s, &target);
    assert_int_equal(report_to(&s, NULL, t, out, &notes, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "frame", "no column 'zone' in the table");
    assert_false(exists("err.html"));
    etacal_table_destroy(t);

    /* an existing page stays as it was after a failed run */
    tu_write_text(&dir, "err.html", "old page\n", where, sizeof where);
    spec_of(&s, &high);
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_ENUM);
    size_t len;
    char *p = page_of("err.html", &len);
    assert_string_equal(p, "old page\n");
    free(p);
    assert_int_equal(temporaries(), 0);

    /* what a report does not take */
    const double two[] = {0.8, 0.9};
    spec_of(&s, two);
    s.fit.ntargets = 2;
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "--target takes one on-time rate in (0,1), such as 0.9");
    spec_of(&s, &target);
    s.fit.half_life = 0;
    s.fit.confidence = 0.95;
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "--confidence is not offered by report (use etacal fit or curve)");
    spec_of(&s, &target);
    s.fit.holdout = 0;
    s.fit.time = NULL;
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "a report needs --holdout, a share in (0,1)");
    spec_of(&s, &target);
    s.every_s = 0;
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "--window and --every take positive durations");
    spec_of(&s, &target);
    s.fit.actual = "pred_s";
    assert_int_equal(report_to(&s, rows_csv, NULL, out, &notes, &err), ETACAL_EINVAL);
    assert_error(&err, ETACAL_EINVAL, "", "--actual and --pred name the same column");
    p = page_of("err.html", &len);
    assert_string_equal(p, "old page\n");
    free(p);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_page_from_csv),
        cmocka_unit_test(test_page_from_memory),
        cmocka_unit_test(test_notes),
        cmocka_unit_test(test_errors),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
