/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_csv_stream.c: the csvstream layer (src/csv_stream.c) on its own:
 * csvstream_run, csvstream_run_range, csv_find_split, format_where and
 * rowbuf, against the contract in src/internal.h.
 *
 * The shapes of the input are those of RFC 4180 (IETF, "Common Format and
 * MIME Type for Comma-Separated Values (CSV) Files", 2005), section 2,
 * cited by rule number beside each check: rule 1 (records end in CRLF),
 * rule 2 (the last record may have no line break), rule 4 (fields split by
 * the delimiter), rule 5 (fields may be quoted), rule 6 (line breaks,
 * quotes and delimiters inside quoted fields), rule 7 (an inner quote is
 * doubled).  Where csvstream goes beyond the RFC (LF alone ends a record, a
 * byte-order mark is dropped, blank lines are skipped, spaces around an
 * unquoted field are trimmed by libcsv), the check cites internal.h or the
 * comments of csv_stream.c instead.
 *
 * What is checked: the fields and their column numbers, the physical line
 * where each record starts (1 = first line, counting the line feeds inside
 * quoted fields and of blank lines), the raw bytes of each record in raw
 * mode (exactly the file's bytes, terminator included), the byte count,
 * records across the 1 MiB read chunks, each error's code, FILE:LINE and
 * message, and a row callback that stops reading. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "testutil.h"

#define CHUNK_BYTES (1u << 20) /* csv_stream.c's read chunk */

/* ---- a logger of what the callbacks see ---------------------------------- */

#define MAXF 8
#define FLEN 96
#define RAWLEN 256

typedef struct rec {
    size_t nf, line, rawlen;
    int raw_null;
    char raw[RAWLEN];
    char f[MAXF][FLEN];
    size_t flen[MAXF];
} rec;

typedef struct logger {
    rec *r;
    size_t n, cap;
    size_t col;        /* fields seen of the record being read */
    int col_order_bad; /* a field came with an unexpected column number */
    size_t stop_at;    /* stop at this record (1-based); 0 never */
    int stop_code;     /* set in err when stopping; 0 leaves err as it is */
    etacal_error *err;
    /* only the line numbers, for large files */
    int lines_only;
    size_t *lines;
    size_t nlines, lcap;
    /* lines_only in raw mode: the expected bytes, records starting at
     * estarts[0..enrec) of ebuf (elen bytes); a mismatch sets raw_bad */
    const char *ebuf;
    const size_t *estarts;
    size_t enrec, elen;
    int raw_bad;
    /* progress */
    uint64_t prog_calls, prog_done, prog_total;
} logger;

/* Record idx's raw bytes must be the file's bytes from its start up to the
 * next record's, less a blank line in between. */
static int raw_matches(const logger *l, size_t idx, const char *raw, size_t rawlen)
{
    if (idx >= l->enrec)
        return 0;
    size_t start = l->estarts[idx], end = idx + 1 < l->enrec ? l->estarts[idx + 1] : l->elen;
    size_t span = end - start;
    if (!(rawlen == span || (rawlen + 1 == span && l->ebuf[end - 1] == '\n')))
        return 0;
    return memcmp(raw, l->ebuf + start, rawlen) == 0;
}

static rec *cur(logger *l)
{
    if (l->n == l->cap) {
        size_t nc = l->cap ? l->cap * 2 : 16;
        rec *nr = realloc(l->r, nc * sizeof *nr);
        assert_non_null(nr);
        l->r = nr;
        l->cap = nc;
    }
    return &l->r[l->n];
}

static void log_field(void *ud, size_t col, const char *s, size_t len)
{
    logger *l = ud;
    if (col != l->col)
        l->col_order_bad = 1;
    l->col++;
    if (l->lines_only)
        return;
    rec *r = cur(l);
    if (col == 0)
        memset(r, 0, sizeof *r);
    if (col < MAXF) {
        size_t k = len < FLEN - 1 ? len : FLEN - 1;
        memcpy(r->f[col], s, k);
        r->f[col][k] = '\0';
        r->flen[col] = len;
    }
}

static int log_row(void *ud, size_t nfields, size_t line, const char *raw, size_t rawlen)
{
    logger *l = ud;
    if (nfields != l->col)
        l->col_order_bad = 1;
    l->col = 0;
    if (l->lines_only) {
        if (l->nlines == l->lcap) {
            size_t nc = l->lcap ? l->lcap * 2 : 1024;
            size_t *nl = realloc(l->lines, nc * sizeof *nl);
            assert_non_null(nl);
            l->lines = nl;
            l->lcap = nc;
        }
        if (raw && !raw_matches(l, l->nlines, raw, rawlen))
            l->raw_bad = 1;
        l->lines[l->nlines++] = line;
    } else {
        rec *r = cur(l);
        r->nf = nfields;
        r->line = line;
        r->rawlen = rawlen;
        r->raw_null = raw == NULL;
        if (raw)
            memcpy(r->raw, raw, rawlen < RAWLEN ? rawlen : RAWLEN);
        l->n++;
    }
    size_t count = l->lines_only ? l->nlines : l->n;
    if (l->stop_at && count == l->stop_at) {
        if (l->stop_code)
            etacal_error_set(l->err, l->stop_code, "callback", "stopped at record %zu", count);
        return 1;
    }
    return 0;
}

static void log_progress(void *ud, uint64_t done, uint64_t total)
{
    logger *l = ud;
    assert_true(done >= l->prog_done); /* never goes back */
    l->prog_calls++;
    l->prog_done = done;
    l->prog_total = total;
}

static void log_free(logger *l)
{
    free(l->r);
    free(l->lines);
    memset(l, 0, sizeof *l);
}

/* ---- fixture ---------------------------------------------------------- */

typedef struct fixture {
    tu_dir dir;
    char path[600];
    char where[700];
    logger log;
    etacal_error err;
    uint64_t bytes;
} fixture;

static int setup(void **state)
{
    fixture *f = calloc(1, sizeof *f);
    if (!f)
        return -1;
    tu_dir_make(&f->dir);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    fixture *f = *state;
    log_free(&f->log);
    tu_dir_remove(&f->dir);
    free(f);
    return 0;
}

static void put_file(fixture *f, const char *bytes, size_t len)
{
    tu_write_bytes(&f->dir, "in.csv", bytes, len, f->path, sizeof f->path);
}

/* Runs csvstream_run over bytes (delimiter ','), logging into f->log. */
static int run_bytes(fixture *f, const char *bytes, size_t len, int raw)
{
    put_file(f, bytes, len);
    log_free(&f->log);
    f->log.err = &f->err;
    etacal_error_clear(&f->err);
    f->bytes = 12345;
    csvstream_cb cb = {log_field, log_row, &f->log, NULL, NULL};
    return csvstream_run(f->path, ',', raw, &cb, &f->bytes, &f->err);
}

static int run_str(fixture *f, const char *text, int raw)
{
    return run_bytes(f, text, strlen(text), raw);
}

static const char *where_line(fixture *f, size_t line)
{
    return tu_where(f->where, sizeof f->where, f->path, line);
}

static void expect_fields(const rec *r, size_t line, size_t nf, ...)
{
    assert_int_equal(r->line, line);
    assert_int_equal(r->nf, nf);
    va_list ap;
    va_start(ap, nf);
    for (size_t i = 0; i < nf && i < MAXF; i++) {
        const char *want = va_arg(ap, const char *);
        if (strcmp(r->f[i], want) != 0 || r->flen[i] != strlen(want))
            fail_msg("line %zu field %zu is '%s' (%zu bytes), expected '%s'", line, i, r->f[i], r->flen[i],
                     want);
    }
    va_end(ap);
}

/* ---- shapes ----------------------------------------------------------- */

static void test_rfc4180_shapes(void **state)
{
    fixture *f = *state;
    /* RFC 4180 sec. 2: rule 1 (CRLF), rule 4 (delimiters, an empty field),
     * rules 5-7 (quoted fields holding a delimiter, a CRLF, a doubled
     * quote), rule 2 (no final line break). */
    const char text[] = "order_id,zone,pred_s\r\n"
                        "A-17,\"North, Old Town\",2.385\r\n"
                        "A-18,\"two\r\nlines\",944.7\r\n"
                        "A-19,\"say \"\"hi\"\"\",\r\n"
                        "A-20,,\"61.875\"";
    for (int raw = 0; raw <= 1; raw++) {
        assert_int_equal(run_bytes(f, text, sizeof text - 1, raw), ETACAL_OK);
        assert_false(f->log.col_order_bad);
        assert_int_equal(f->bytes, sizeof text - 1);
        assert_int_equal(f->log.n, 5);
        expect_fields(&f->log.r[0], 1, 3, "order_id", "zone", "pred_s");
        expect_fields(&f->log.r[1], 2, 3, "A-17", "North, Old Town", "2.385");
        expect_fields(&f->log.r[2], 3, 3, "A-18", "two\r\nlines", "944.7");
        expect_fields(&f->log.r[3], 5, 3, "A-19", "say \"hi\"", "");
        expect_fields(&f->log.r[4], 6, 3, "A-20", "", "61.875");
        for (size_t i = 0; i < 5; i++)
            assert_int_equal(f->log.r[i].raw_null, !raw);
    }
}

static void test_line_numbers(void **state)
{
    fixture *f = *state;
    /* A record spanning lines 3-5 (rule 6, LF inside quotes), two blank
     * lines (internal.h: skipped, but counted), a quoted field holding
     * only line feeds, and an LF-ended file. */
    const char *text = "h1,h2\n"
                       "a,1\n"
                       "\"x\ny\nz\",2\n"
                       "\n"
                       "\n"
                       "b,\"\n\n\n\"\n"
                       "c,4\n";
    for (int raw = 0; raw <= 1; raw++) {
        assert_int_equal(run_str(f, text, raw), ETACAL_OK);
        assert_int_equal(f->log.n, 5);
        const size_t want[] = {1, 2, 3, 8, 12};
        for (size_t i = 0; i < 5; i++)
            assert_int_equal(f->log.r[i].line, want[i]);
        expect_fields(&f->log.r[2], 3, 2, "x\ny\nz", "2");
        expect_fields(&f->log.r[3], 8, 2, "b", "\n\n\n");
    }
    /* The same with CRLF everywhere, blank lines too (rule 1). */
    const char *crlf = "h1,h2\r\n"
                       "a,1\r\n"
                       "\"x\r\ny\r\nz\",2\r\n"
                       "\r\n"
                       "\r\n"
                       "b,\"\r\n\r\n\r\n\"\r\n"
                       "c,4\r\n";
    for (int raw = 0; raw <= 1; raw++) {
        assert_int_equal(run_str(f, crlf, raw), ETACAL_OK);
        assert_int_equal(f->log.n, 5);
        const size_t want[] = {1, 2, 3, 8, 12};
        for (size_t i = 0; i < 5; i++)
            assert_int_equal(f->log.r[i].line, want[i]);
        expect_fields(&f->log.r[4], 12, 2, "c", "4");
    }
}

static void test_bom_blank_lines_spaces(void **state)
{
    fixture *f = *state;
    /* A UTF-8 byte-order mark is dropped (internal.h): the first field is
     * "zone", not "\xEF\xBB\xBFzone"; it still counts in the bytes read.
     * Leading blank lines are skipped and counted. */
    const char text[] = "\xEF\xBB\xBF\n\nzone,pred_s\nnorth,2.385\n\n";
    for (int raw = 0; raw <= 1; raw++) {
        assert_int_equal(run_bytes(f, text, sizeof text - 1, raw), ETACAL_OK);
        assert_int_equal(f->bytes, sizeof text - 1);
        assert_int_equal(f->log.n, 2);
        expect_fields(&f->log.r[0], 3, 2, "zone", "pred_s");
        expect_fields(&f->log.r[1], 4, 2, "north", "2.385");
        if (raw) {
            assert_int_equal(f->log.r[0].rawlen, 12);
            assert_memory_equal(f->log.r[0].raw, "zone,pred_s\n", 12);
        }
    }
    /* Only a BOM that starts the file is one: elsewhere it is field text. */
    const char mid[] = "a,b\n\xEF\xBB\xBFx,y\n";
    assert_int_equal(run_bytes(f, mid, sizeof mid - 1, 0), ETACAL_OK);
    expect_fields(&f->log.r[1], 2, 2, "\xEF\xBB\xBFx", "y");
    /* Spaces and tabs around unquoted fields are trimmed by libcsv (unlike
     * RFC 4180 rule 4, which keeps them; csv_stream.c's comment); quoted
     * spaces stay (rule 5). */
    assert_int_equal(run_str(f, " a ,\tb\t,\" c \"\n", 0), ETACAL_OK);
    expect_fields(&f->log.r[0], 1, 3, "a", "b", " c ");
}

static void test_empty_inputs(void **state)
{
    fixture *f = *state;
    /* Empty input is no error here: 0 bytes, no row (internal.h). */
    for (int raw = 0; raw <= 1; raw++) {
        assert_int_equal(run_bytes(f, "", 0, raw), ETACAL_OK);
        assert_int_equal(f->bytes, 0);
        assert_int_equal(f->log.n, 0);
        assert_int_equal(f->err.code, ETACAL_OK);
        /* Only blank lines, or only a byte-order mark: no row either. */
        assert_int_equal(run_str(f, "\n\r\n\n", raw), ETACAL_OK);
        assert_int_equal(f->bytes, 4);
        assert_int_equal(f->log.n, 0);
        assert_int_equal(run_str(f, "\xEF\xBB\xBF", raw), ETACAL_OK);
        assert_int_equal(f->bytes, 3);
        assert_int_equal(f->log.n, 0);
        /* One field, no line break (rule 2). */
        assert_int_equal(run_str(f, "x", raw), ETACAL_OK);
        assert_int_equal(f->log.n, 1);
        expect_fields(&f->log.r[0], 1, 1, "x");
        /* A quoted empty field is a record of one empty field, unlike a
         * blank line. */
        assert_int_equal(run_str(f, "\n\"\"\n", raw), ETACAL_OK);
        assert_int_equal(f->log.n, 1);
        expect_fields(&f->log.r[0], 2, 1, "");
    }
}

static void test_raw_bytes_exact(void **state)
{
    fixture *f = *state;
    /* In raw mode each record's raw bytes are exactly the file's bytes of
     * that record, line terminator included (internal.h); their
     * concatenation with the skipped blank lines is the whole file. */
    const char text[] = "a,\"b\"\"\"\r\n"
                        "\"multi\nline, \"\"quoted\"\"\",7.125\n"
                        "\r\n"
                        "\"\r\n\",x\r\n"
                        "\n"
                        "last,\"no newline\"";
    const char *want[] = {"a,\"b\"\"\"\r\n", "\"multi\nline, \"\"quoted\"\"\",7.125\n", "\"\r\n\",x\r\n",
                          "last,\"no newline\""};
    const size_t wline[] = {1, 2, 5, 8};
    assert_int_equal(run_bytes(f, text, sizeof text - 1, 1), ETACAL_OK);
    assert_int_equal(f->log.n, 4);
    for (size_t i = 0; i < 4; i++) {
        assert_int_equal(f->log.r[i].rawlen, strlen(want[i]));
        assert_memory_equal(f->log.r[i].raw, want[i], strlen(want[i]));
        assert_int_equal(f->log.r[i].line, wline[i]);
    }
    expect_fields(&f->log.r[0], 1, 2, "a", "b\"");
    expect_fields(&f->log.r[1], 2, 2, "multi\nline, \"quoted\"", "7.125");
    expect_fields(&f->log.r[2], 5, 2, "\r\n", "x");
}

/* Records of a file larger than two read chunks, with quoted line feeds
 * and closing quotes placed on and around the chunk boundaries: the line
 * numbers, and in raw mode the bytes, are those of one whole read. */
static void test_across_chunks(void **state)
{
    fixture *f = *state;
    /* variant 0: quoted fields everywhere, line feeds anywhere in the one
     * at each boundary; 1: that field opens after the last line feed of a
     * chunk and has its line feeds only in the next chunk (the raw scan
     * carries the quote state over); 2: only the first boundary has a
     * quoted field, and no quote follows it (the chunk after may have no
     * quote at all while libcsv still holds the field open). */
    for (int variant = 0; variant <= 2; variant++)
    for (int shift = -4; shift <= 4; shift++) {
        size_t cap = 3 * CHUNK_BYTES, len = 0;
        char *buf = malloc(cap);
        assert_non_null(buf);
        size_t *starts = malloc(200000 * sizeof *starts), *lines = malloc(200000 * sizeof *lines);
        assert_non_null(starts);
        assert_non_null(lines);
        size_t nrec = 0, line = 1;
        tu_rng rng = {UINT64_C(2385) + (uint64_t)(shift + 4) + 16 * (uint64_t)variant};
        int quotes = 1;
        while (len < 2 * CHUNK_BYTES + 5000) {
            assert_true(nrec < 200000);
            starts[nrec] = len;
            lines[nrec] = line;
            nrec++;
            /* near a boundary: a quoted field with line feeds whose closing
             * quote lands at boundary + shift */
            size_t b = len < CHUNK_BYTES ? CHUNK_BYTES : 2 * CHUNK_BYTES;
            if (quotes && b - len < 300 && b - len > 40) {
                buf[len++] = 'q';
                buf[len++] = ',';
                buf[len++] = '"';
                size_t close = b + (size_t)(shift + 4) - 4 + (variant == 1 ? 40 : 0);
                while (len < close) {
                    int lf = tu_below(&rng, 5) == 0 && (variant != 1 || len >= b);
                    char ch = lf ? '\n' : 'm';
                    line += ch == '\n';
                    buf[len++] = ch;
                }
                buf[len++] = '"';
                buf[len++] = '\n';
                line++;
                if (variant == 2)
                    quotes = 0;
                continue;
            }
            int k = snprintf(buf + len, cap - len, "r%zu,%.3f", nrec, tu_unif(&rng) * 5000);
            len += (size_t)k;
            if (quotes && tu_below(&rng, 7) == 0) { /* a quoted field with a CRLF */
                memcpy(buf + len, ",\"x\r\ny\"", 7);
                len += 7;
                line++;
            }
            if (tu_below(&rng, 3) == 0)
                buf[len++] = '\r';
            buf[len++] = '\n';
            line++;
            if (tu_below(&rng, 11) == 0) { /* a blank line */
                buf[len++] = '\n';
                line++;
            }
        }
        for (int raw = 0; raw <= 1; raw++) {
            put_file(f, buf, len);
            log_free(&f->log);
            f->log.lines_only = 1;
            f->log.ebuf = buf;
            f->log.estarts = starts;
            f->log.enrec = nrec;
            f->log.elen = len;
            etacal_error_clear(&f->err);
            csvstream_cb cb = {log_field, log_row, &f->log, log_progress, &f->log};
            assert_int_equal(csvstream_run(f->path, ',', raw, &cb, &f->bytes, &f->err), ETACAL_OK);
            assert_int_equal(f->bytes, len);
            assert_false(f->log.col_order_bad);
            assert_false(f->log.raw_bad);
            /* progress: every chunk, ending at the file's size */
            assert_int_equal(f->log.prog_calls, 3);
            assert_int_equal(f->log.prog_done, len);
            assert_int_equal(f->log.prog_total, len);
            assert_int_equal(f->log.nlines, nrec);
            for (size_t i = 0; i < nrec; i++)
                if (f->log.lines[i] != lines[i])
                    fail_msg("variant %d shift %d raw %d: record %zu at line %zu, expected %zu", variant,
                             shift, raw, i,
                             f->log.lines[i], lines[i]);
        }
        free(lines);
        free(starts);
        free(buf);
    }
}

/* ---- errors ----------------------------------------------------------- */

static void test_unterminated_and_malformed_quotes(void **state)
{
    fixture *f = *state;
    for (int raw = 0; raw <= 1; raw++) {
        /* An unterminated quote: FILE:LINE of the record it starts. */
        assert_int_equal(run_str(f, "h1,h2\na,1\n\nb,\"open\nmore\nlines\n", raw), ETACAL_EPARSE);
        assert_error(&f->err, ETACAL_EPARSE, where_line(f, 4), "unterminated quoted field");
        assert_int_equal(f->log.n, 2);
        /* ... also when the open quote is the file's last byte */
        assert_int_equal(run_str(f, "h1,h2\r\na,\"", raw), ETACAL_EPARSE);
        assert_error(&f->err, ETACAL_EPARSE, where_line(f, 2), "unterminated quoted field");
        /* A quote inside an unquoted field (rule 5) and text after a
         * closing quote (rules 5 and 7). */
        const char *msg = "malformed quoting: a quoted field must be quoted as a whole, with inner quotes "
                          "doubled";
        assert_int_equal(run_str(f, "h1,h2\n\"x\ny\",1\nab\"c,2\n", raw), ETACAL_EPARSE);
        assert_error(&f->err, ETACAL_EPARSE, where_line(f, 4), msg);
        assert_int_equal(run_str(f, "h1,h2\nz,2.385\n\"ab\"c,2\nq,3\n", raw), ETACAL_EPARSE);
        assert_error(&f->err, ETACAL_EPARSE, where_line(f, 3), msg);
    }
}

/* Raw mode hands each record's bytes on to be copied, cut at the line
 * terminator (LF or CRLF, RFC 4180 rule 1): a carriage return that is not
 * right before an LF, outside quotes, cannot be cut there, and is refused
 * with csv_stream.c's message wherever it is, the end of the file
 * included.  Inside quotes it is field text (rule 6). */
static void test_raw_bare_cr(void **state)
{
    fixture *f = *state;
    const char *msg = "a bare carriage return ends a line; use LF or CRLF line endings";
    const struct {
        const char *text;
        size_t line;
    } bad[] = {
        {"h1,h2\na,b\r3,4\n", 2},    /* in the middle of a line */
        {"h1,h2\nx,z,1000\r", 2},      /* the last line, no LF after it */
        {"h1,h2\r\na,b\r\r\n", 2},  /* CR CR LF */
        {"h1,h2\n\n\rb,1\n", 3},     /* a line starting with a CR */
        {"h1,h2\na,1\n\r", 3},        /* a lone CR at the end */
        {"h1,h2\n\"q\nq\",1\rc,2\n", 2},
    };
    for (size_t k = 0; k < sizeof bad / sizeof *bad; k++) {
        int rc = run_str(f, bad[k].text, 1);
        if (rc != ETACAL_EPARSE)
            fail_msg("case %zu: status %d, expected %d", k, rc, ETACAL_EPARSE);
        assert_error(&f->err, ETACAL_EPARSE, where_line(f, bad[k].line), msg);
    }
    /* Accepted: CRLF, a CRLF blank line, CRs inside quotes, also before
     * an LF inside quotes and as the last byte of a quoted field. */
    const char ok[] = "h1,h2\r\n\r\n\"a\rb\",\"c\r\nd\"\n\"e\r\",f\r\n\"g\r\"";
    assert_int_equal(run_bytes(f, ok, sizeof ok - 1, 1), ETACAL_OK);
    assert_int_equal(f->log.n, 4);
    expect_fields(&f->log.r[1], 3, 2, "a\rb", "c\r\nd");
    expect_fields(&f->log.r[2], 5, 2, "e\r", "f");
    expect_fields(&f->log.r[3], 6, 1, "g\r");
    assert_int_equal(f->log.r[2].rawlen, 8);
    assert_memory_equal(f->log.r[2].raw, "\"e\r\",f\r\n", 8);
}

static void test_nul_byte(void **state)
{
    fixture *f = *state;
    const char text[] = "h1,h2,h3\n\"a\nb\",x,y\nk,v\0w,z\nlast,1,2\n";
    for (int raw = 0; raw <= 1; raw++) {
        assert_int_equal(run_bytes(f, text, sizeof text - 1, raw), ETACAL_EPARSE);
        assert_error(&f->err, ETACAL_EPARSE, where_line(f, 4),
                     "field 2 holds a NUL byte (binary data is not CSV)");
        assert_int_equal(f->log.n, 2); /* no row for the record with the NUL, none after */
    }
}

static void test_open_errors(void **state)
{
    fixture *f = *state;
    logger l = {0};
    csvstream_cb cb = {log_field, log_row, &l, NULL, NULL};
    char path[700];
    tu_path(path, sizeof path, &f->dir, "absent.csv");
    uint64_t bytes = 99;
    assert_int_equal(csvstream_run(path, ',', 0, &cb, &bytes, &f->err), ETACAL_EIO);
    assert_error(&f->err, ETACAL_EIO, path, "cannot open: No such file or directory");
    assert_int_equal(bytes, 0);
    assert_int_equal(csvstream_run(f->dir.path, ',', 1, &cb, NULL, &f->err), ETACAL_EIO);
    assert_error(&f->err, ETACAL_EIO, f->dir.path, "is a directory");
    assert_int_equal(l.n, 0);
    log_free(&l);
}

static void test_row_callback_stops(void **state)
{
    fixture *f = *state;
    const char *text = "h\n1\n\"2\n2\"\n3\n4\n";
    for (int raw = 0; raw <= 1; raw++) {
        put_file(f, text, strlen(text));
        for (size_t stop = 1; stop <= 5; stop++) {
            log_free(&f->log);
            f->log.err = &f->err;
            f->log.stop_at = stop;
            f->log.stop_code = ETACAL_ENUM;
            etacal_error_clear(&f->err);
            csvstream_cb cb = {log_field, log_row, &f->log, NULL, NULL};
            /* the callback's error comes back, and no row after it */
            assert_int_equal(csvstream_run(f->path, ',', raw, &cb, NULL, &f->err), ETACAL_ENUM);
            char msg[64];
            snprintf(msg, sizeof msg, "stopped at record %zu", stop);
            assert_error(&f->err, ETACAL_ENUM, "callback", msg);
            assert_int_equal(f->log.n, stop);
        }
        /* A callback that stops without filling the error: EPARSE. */
        log_free(&f->log);
        f->log.stop_at = 2;
        etacal_error_clear(&f->err);
        csvstream_cb cb = {log_field, log_row, &f->log, NULL, NULL};
        assert_int_equal(csvstream_run(f->path, ',', raw, &cb, NULL, &f->err), ETACAL_EPARSE);
        assert_int_equal(f->log.n, 2);
        /* Stopping before a malformed record: the callback's error wins. */
        put_file(f, "h\n1\nab\"c\n", 9);
        log_free(&f->log);
        f->log.err = &f->err;
        f->log.stop_at = 2;
        f->log.stop_code = ETACAL_EINVAL;
        etacal_error_clear(&f->err);
        assert_int_equal(csvstream_run(f->path, ',', raw, &cb, NULL, &f->err), ETACAL_EINVAL);
        assert_error(&f->err, ETACAL_EINVAL, "callback", "stopped at record 2");
    }
}

static void test_other_delimiters(void **state)
{
    fixture *f = *state;
    logger l = {0};
    csvstream_cb cb = {log_field, log_row, &l, NULL, NULL};
    /* Semicolon: commas are text. */
    tu_write_text(&f->dir, "semi.csv", "zone;pred_s\n\"a;b\";1,5\n", f->path, sizeof f->path);
    assert_int_equal(csvstream_run(f->path, ';', 0, &cb, NULL, &f->err), ETACAL_OK);
    assert_int_equal(l.n, 2);
    expect_fields(&l.r[1], 2, 2, "a;b", "1,5");
    log_free(&l);
    cb.ud = &l;
    /* Tab: spaces around a field are trimmed, tabs are delimiters, so an
     * empty field between two tabs stays. */
    tu_write_text(&f->dir, "tab.tsv", "a\t b \t\tc d\n", f->path, sizeof f->path);
    assert_int_equal(csvstream_run(f->path, '\t', 1, &cb, NULL, &f->err), ETACAL_OK);
    assert_int_equal(l.n, 1);
    expect_fields(&l.r[0], 1, 4, "a", "b", "", "c d");
    log_free(&l);
    cb.ud = &l;
    /* delim 0 means ',' */
    tu_write_text(&f->dir, "zero.csv", "x,y\n", f->path, sizeof f->path);
    assert_int_equal(csvstream_run(f->path, 0, 0, &cb, NULL, &f->err), ETACAL_OK);
    expect_fields(&l.r[0], 1, 2, "x", "y");
    log_free(&l);
}

/* ---- ranges and the split -------------------------------------------- */

static void test_range_mid_file(void **state)
{
    fixture *f = *state;
    /* offsets: header 0-5, "a,1\n" 6, quoted record 10-21, blank 22,
     * "c,3\r\n" 23, "d,4" 28-30 */
    const char text[] = "h1,h2\na,1\n\"x\ny\nz\",2.5\n\nc,3\r\nd,4";
    put_file(f, text, sizeof text - 1);
    for (int raw = 0; raw <= 1; raw++) {
        /* From the first data record, lines counted from first_line. */
        log_free(&f->log);
        csvstream_cb cb = {log_field, log_row, &f->log, NULL, NULL};
        csvstream_range r = {6, sizeof text - 1, 2, 0, 0, 0};
        uint64_t bytes = 0;
        assert_int_equal(csvstream_run_range(f->path, ',', raw, &cb, &r, &bytes, &f->err), ETACAL_OK);
        assert_int_equal(bytes, sizeof text - 1 - 6);
        assert_int_equal(f->log.n, 4);
        expect_fields(&f->log.r[0], 2, 2, "a", "1");
        expect_fields(&f->log.r[1], 3, 2, "x\ny\nz", "2.5");
        expect_fields(&f->log.r[2], 7, 2, "c", "3");
        expect_fields(&f->log.r[3], 8, 2, "d", "4");
        assert_int_equal(r.open_end, 0);
        assert_int_equal(r.end_line, 8); /* no line feed after the last record */
        /* A middle range [10, 28): its end is a record boundary. */
        log_free(&f->log);
        cb.ud = &f->log;
        r = (csvstream_range){10, 28, 3, 0, 0, 0};
        assert_int_equal(csvstream_run_range(f->path, ',', raw, &cb, &r, &bytes, &f->err), ETACAL_OK);
        assert_int_equal(bytes, 18);
        assert_int_equal(f->log.n, 2);
        expect_fields(&f->log.r[0], 3, 2, "x\ny\nz", "2.5");
        expect_fields(&f->log.r[1], 7, 2, "c", "3");
        if (raw) {
            assert_int_equal(f->log.r[1].rawlen, 5);
            assert_memory_equal(f->log.r[1].raw, "c,3\r\n", 5);
        }
        assert_int_equal(r.end_line, 8);
        assert_int_equal(r.open_end, 0);
        /* first_line is only a number: any start line is taken as given */
        log_free(&f->log);
        cb.ud = &f->log;
        r = (csvstream_range){28, sizeof text - 1, 1000, 0, 0, 0};
        assert_int_equal(csvstream_run_range(f->path, ',', raw, &cb, &r, NULL, &f->err), ETACAL_OK);
        assert_int_equal(f->log.n, 1);
        expect_fields(&f->log.r[0], 1000, 2, "d", "4");
    }
}

static void test_range_open_end(void **state)
{
    fixture *f = *state;
    /* The split at offset 16 falls after the line feed inside the quoted
     * field of line 3 (rule 6). */
    const char text[] = "h1,h2\na,1\n\"x\ny\nz\",2.5\nc,3\n";
    put_file(f, text, sizeof text - 1);
    for (int raw = 0; raw <= 1; raw++) {
        log_free(&f->log);
        csvstream_cb cb = {log_field, log_row, &f->log, NULL, NULL};
        /* allow_open: no error, open_end set, the complete records before
         * it delivered */
        csvstream_range r = {6, 13, 2, 1, 0, 0};
        etacal_error_clear(&f->err);
        assert_int_equal(csvstream_run_range(f->path, ',', raw, &cb, &r, NULL, &f->err), ETACAL_OK);
        assert_int_equal(r.open_end, 1);
        assert_int_equal(f->err.code, ETACAL_OK);
        assert_int_equal(f->log.n, 1);
        expect_fields(&f->log.r[0], 2, 2, "a", "1");
        /* without allow_open it is an unterminated quote at line 3 */
        log_free(&f->log);
        cb.ud = &f->log;
        r = (csvstream_range){6, 13, 2, 0, 0, 0};
        assert_int_equal(csvstream_run_range(f->path, ',', raw, &cb, &r, NULL, &f->err), ETACAL_EPARSE);
        assert_error(&f->err, ETACAL_EPARSE, where_line(f, 3), "unterminated quoted field");
        assert_int_equal(r.open_end, 0);
        /* allow_open with a range ending on a record boundary: open_end 0 */
        log_free(&f->log);
        cb.ud = &f->log;
        r = (csvstream_range){6, 22, 2, 1, 0, 0};
        assert_int_equal(csvstream_run_range(f->path, ',', raw, &cb, &r, NULL, &f->err), ETACAL_OK);
        assert_int_equal(r.open_end, 0);
        assert_int_equal(f->log.n, 2);
        assert_int_equal(r.end_line, 6);
    }
    /* "-" is a file name to the library, not standard input (that is the
     * command line's convention): absent here, it cannot be opened. */
    csvstream_cb cb = {log_field, log_row, &f->log, NULL, NULL};
    csvstream_range r = {6, 13, 2, 0, 0, 0};
    char cwd[600];
    assert_non_null(getcwd(cwd, sizeof cwd));
    assert_int_equal(chdir(f->dir.path), 0);
    assert_int_equal(csvstream_run_range("-", ',', 0, &cb, &r, NULL, &f->err), ETACAL_EIO);
    assert_string_equal(f->err.where, "-");
    assert_string_equal(f->err.msg, "cannot open: No such file or directory");
    assert_int_equal(chdir(cwd), 0);
}

static void test_find_split(void **state)
{
    fixture *f = *state;
    uint64_t hend = 7, split = 7;
    size_t hlines = 7;
    /* A header spanning two lines (a quoted LF), then short records. */
    char text[4096];
    size_t len = (size_t)snprintf(text, sizeof text, "\"zone\nname\",pred_s\n");
    for (int i = 0; i < 100; i++)
        len += (size_t)snprintf(text + len, sizeof text - len, "z%d,%d.%03d\n", i, i * 37, (i * 997) % 1000);
    put_file(f, text, len);
    assert_int_equal(csv_find_split(f->path, len, &hend, &hlines, &split), 0);
    assert_int_equal(hend, 19);
    assert_int_equal(hlines, 2);
    const char *mid = memchr(text + len / 2, '\n', len - len / 2);
    assert_non_null(mid);
    assert_int_equal(split, (uint64_t)(mid - text) + 1);
    assert_int_equal(text[split - 1], '\n');
    /* The two parts read with run_range give the rows of one whole read,
     * lines shifted by the first part's end_line as csv_read.c does. */
    logger whole = {0}, a = {0}, b = {0};
    csvstream_cb cw = {log_field, log_row, &whole, NULL, NULL};
    assert_int_equal(csvstream_run(f->path, ',', 0, &cw, NULL, &f->err), ETACAL_OK);
    csvstream_cb ca = {log_field, log_row, &a, NULL, NULL}, cbb = {log_field, log_row, &b, NULL, NULL};
    csvstream_range ra = {hend, split, hlines + 1, 1, 0, 0}, rb = {split, len, 1, 0, 0, 0};
    assert_int_equal(csvstream_run_range(f->path, ',', 0, &ca, &ra, NULL, &f->err), ETACAL_OK);
    assert_int_equal(csvstream_run_range(f->path, ',', 0, &cbb, &rb, NULL, &f->err), ETACAL_OK);
    assert_int_equal(ra.open_end, 0);
    assert_int_equal(1 + a.n + b.n, whole.n);
    for (size_t i = 0; i < a.n; i++)
        assert_int_equal(a.r[i].line, whole.r[1 + i].line);
    for (size_t i = 0; i < b.n; i++) {
        assert_int_equal(b.r[i].line + ra.end_line - 1, whole.r[1 + a.n + i].line);
        assert_string_equal(b.r[i].f[0], whole.r[1 + a.n + i].f[0]);
    }
    log_free(&whole);
    log_free(&a);
    log_free(&b);

    /* The middle inside a quoted field: the split is a line feed inside
     * it, and the first part says so (open_end). */
    len = (size_t)snprintf(text, sizeof text, "h1,h2\nk,\"");
    for (int i = 0; i < 60; i++)
        len += (size_t)snprintf(text + len, sizeof text - len, "line %d of a long note\n", i);
    len += (size_t)snprintf(text + len, sizeof text - len, "\",1\nlast,2\n");
    put_file(f, text, len);
    assert_int_equal(csv_find_split(f->path, len, &hend, &hlines, &split), 0);
    assert_int_equal(hend, 6);
    assert_int_equal(hlines, 1);
    assert_true(split > hend && split < len);
    logger o = {0};
    csvstream_cb co = {log_field, log_row, &o, NULL, NULL};
    csvstream_range ro = {hend, split, 2, 1, 0, 0};
    assert_int_equal(csvstream_run_range(f->path, ',', 0, &co, &ro, NULL, &f->err), ETACAL_OK);
    assert_int_equal(ro.open_end, 1);
    assert_int_equal(o.n, 0);
    log_free(&o);

    /* No line feed at all: no header end, no split. */
    put_file(f, "h1,h2", 5);
    assert_int_equal(csv_find_split(f->path, 5, &hend, &hlines, &split), 0);
    assert_int_equal(hend, 0);
    assert_int_equal(hlines, 0);
    assert_int_equal(split, 0);
    /* The middle before the header's end: no split. */
    put_file(f, "a_long_header_name,b\nx,1\n", 25);
    assert_int_equal(csv_find_split(f->path, 25, &hend, &hlines, &split), 0);
    assert_int_equal(hend, 21);
    assert_int_equal(split, 0);
    /* A file that cannot be opened. */
    char path[700];
    tu_path(path, sizeof path, &f->dir, "absent.csv");
    assert_int_equal(csv_find_split(path, 100, &hend, &hlines, &split), -1);
    assert_int_equal(hend, 0);
    assert_int_equal(split, 0);
}

/* ---- format_where, rowbuf --------------------------------------------- */

static void test_format_where(void **state)
{
    (void)state;
    char buf[64];
    format_where(buf, sizeof buf, "orders.csv", 2385);
    assert_string_equal(buf, "orders.csv:2385");
    /* line 0: the file alone */
    format_where(buf, sizeof buf, "orders.csv", 0);
    assert_string_equal(buf, "orders.csv");
    format_where(buf, sizeof buf, "-", 1);
    assert_string_equal(buf, "-:1");
    /* cut to the buffer, NUL-terminated */
    char small[8];
    memset(small, 'Z', sizeof small);
    format_where(small, sizeof small, "orders.csv", 17);
    assert_string_equal(small, "orders.");
    /* SIZE_MAX prints in full */
    format_where(buf, sizeof buf, "f", SIZE_MAX);
    char want[64];
    snprintf(want, sizeof want, "f:%zu", (size_t)SIZE_MAX);
    assert_string_equal(buf, want);
}

static void rb_field(void *ud, size_t col, const char *s, size_t len)
{
    (void)col;
    rowbuf_add(ud, s, len);
}

typedef struct rb_check {
    rowbuf *rb;
    size_t rows;
} rb_check;

static void rbc_field(void *ud, size_t col, const char *s, size_t len)
{
    rb_check *c = ud;
    rb_field(c->rb, col, s, len);
}

static int rbc_row(void *ud, size_t nfields, size_t line, const char *raw, size_t rawlen)
{
    (void)raw;
    (void)rawlen;
    rb_check *c = ud;
    rowbuf *r = c->rb;
    assert_false(r->oom);
    assert_int_equal(r->nf, nfields);
    if (line == 1) {
        assert_string_equal(rowbuf_get(r, 0), "zone");
        assert_string_equal(rowbuf_get(r, 2), "");
    } else if (line == 2) {
        /* a field with a NUL-free quoted LF and a doubled quote, copied
         * out of libcsv's buffer */
        assert_string_equal(rowbuf_get(r, 0), "two\nlines");
        assert_string_equal(rowbuf_get(r, 1), "a \"b\"");
        assert_int_equal(rowbuf_len(r, 1), 5);
    } else {
        assert_int_equal(line, 4);
        assert_int_equal(nfields, 300);
        for (size_t i = 0; i < nfields; i++) {
            char want[32];
            snprintf(want, sizeof want, "v%zu.%zu", i, i * 7 % 1000);
            assert_string_equal(rowbuf_get(r, i), want);
            assert_int_equal(rowbuf_len(r, i), strlen(want));
        }
    }
    rowbuf_reset(r);
    c->rows++;
    return 0;
}

static void test_rowbuf_with_stream(void **state)
{
    fixture *f = *state;
    char text[8192];
    size_t len = (size_t)snprintf(text, sizeof text, "zone,x,\n\"two\nlines\",\"a \"\"b\"\"\",q\n");
    for (size_t i = 0; i < 300; i++)
        len += (size_t)snprintf(text + len, sizeof text - len, "%sv%zu.%zu", i ? "," : "", i, i * 7 % 1000);
    text[len++] = '\n';
    put_file(f, text, len);
    rowbuf rb;
    memset(&rb, 0, sizeof rb);
    rb_check c = {&rb, 0};
    csvstream_cb cb = {rbc_field, rbc_row, &c, NULL, NULL};
    assert_int_equal(csvstream_run(f->path, ',', 0, &cb, NULL, &f->err), ETACAL_OK);
    assert_int_equal(c.rows, 3);
    rowbuf_free(&rb);
    assert_null(rb.buf);
    assert_int_equal(rb.nf, 0);
    /* freeing twice, and a zeroed rowbuf, is harmless */
    rowbuf_free(&rb);
}

int main(void)
{
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
    const struct CMUnitTest tests[] = {
        T(test_rfc4180_shapes),
        T(test_line_numbers),
        T(test_bom_blank_lines_spaces),
        T(test_empty_inputs),
        T(test_raw_bytes_exact),
        T(test_across_chunks),
        T(test_unterminated_and_malformed_quotes),
        T(test_raw_bare_cr),
        T(test_nul_byte),
        T(test_open_errors),
        T(test_row_callback_stops),
        T(test_other_delimiters),
        T(test_range_mid_file),
        T(test_range_open_end),
        T(test_find_split),
        T(test_format_where),
        T(test_rowbuf_with_stream),
    };
#undef T
    return cmocka_run_group_tests(tests, NULL, NULL);
}
