/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_csv_read.c: etacal_table_read_csv and the csvstream layer under it.
 *
 * RFC 4180 shapes (quoted delimiters, doubled quotes, newlines inside
 * quotes, CRLF), a UTF-8 byte-order mark, blank lines, a last line without a
 * newline, other delimiters; every data error with its code, FILE:LINE and
 * message; the missing-value and --bad-rows skip policies; the key
 * dictionaries; files larger than one read chunk. */
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "etacal/etacal.h"
#include "internal.h"
#include "testutil.h"

/* The columns most tests keep: table column 0 actual, 1 pred, 2 zone. */
static const etacal_colspec std_cols[] = {
    {"actual_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE,
     "duration"},
    {"pred_s", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING | ETACAL_NUM_NONNEG | ETACAL_NUM_FINITE,
     "prediction"},
    {"zone", ETACAL_COL_KEY, 0, NULL},
};

typedef struct fixture {
    tu_dir dir;
    char path[600];
    etacal_table *t;
    etacal_error err;
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
    etacal_table_destroy(f->t);
    tu_dir_remove(&f->dir);
    free(f);
    return 0;
}

/* Writes text to a file and reads it with the standard columns. */
static int read_text(fixture *f, const char *text, size_t len, const etacal_read_opts *opts)
{
    etacal_table_destroy(f->t);
    f->t = NULL;
    tu_write_bytes(&f->dir, "in.csv", text, len, f->path, sizeof f->path);
    etacal_error_clear(&f->err);
    return etacal_table_read_csv(f->path, std_cols, 3, opts, &f->t, &f->err);
}

static int read_str(fixture *f, const char *text, const etacal_read_opts *opts)
{
    return read_text(f, text, strlen(text), opts);
}

/* Reading must fail with code, at line (0: where is the bare path), with
 * message msg. */
static void expect_error(fixture *f, const char *text, const etacal_read_opts *opts, int code,
                         size_t line, const char *msg)
{
    int rc = read_str(f, text, opts);
    if (rc == ETACAL_OK)
        fail_msg("reading succeeded, expected error %d '%s'", code, msg);
    char where[700];
    if (line)
        tu_where(where, sizeof where, f->path, line);
    else
        snprintf(where, sizeof where, "%s", f->path);
    assert_error(&f->err, code, where, msg);
    assert_int_equal(rc, code);
    assert_null(f->t);
}

static void test_read_basic(void **state)
{
    fixture *f = *state;
    const char *text = "order_id,pred_s,zone,actual_s,courier\n"
                       "A-17,1800,north,1943.25,c9\n"
                       "A-18,944.7,south,901.125,c2\n"
                       "A-19,2.385,north,0,c9\n"
                       "A-20,61.875,east,77.5,c1\n";
    assert_int_equal(read_str(f, text, NULL), ETACAL_OK);
    const etacal_table *t = f->t;
    assert_int_equal(etacal_table_rows(t), 4);
    assert_int_equal(etacal_table_cols(t), 3);
    assert_string_equal(etacal_table_col_name(t, 0), "actual_s");
    assert_string_equal(etacal_table_col_name(t, 2), "zone");
    assert_string_equal(etacal_table_source(t), f->path);
    const double *y = etacal_table_num(t, 0), *p = etacal_table_num(t, 1);
    assert_non_null(y);
    assert_non_null(p);
    const double want_y[] = {1943.25, 901.125, 0, 77.5}, want_p[] = {1800, 944.7, 2.385, 61.875};
    for (int i = 0; i < 4; i++) {
        assert_same_double(y[i], want_y[i]);
        assert_same_double(p[i], want_p[i]);
    }
    const uint32_t *z = key_ids_of(t, 2);
    assert_non_null(z);
    assert_int_equal(etacal_table_key_count(t, 2), 3);
    /* ids in order of first appearance */
    assert_int_equal(z[0], 0);
    assert_int_equal(z[1], 1);
    assert_int_equal(z[2], 0);
    assert_int_equal(z[3], 2);
    assert_string_equal(etacal_table_key_text(t, 2, 0), "north");
    assert_string_equal(etacal_table_key_text(t, 2, 1), "south");
    assert_string_equal(etacal_table_key_text(t, 2, 2), "east");
    /* Accessors of the other type, and out of range. */
    assert_null(etacal_table_num(t, 2));
    assert_null(etacal_table_key_ids(t, 0, NULL));
    assert_int_equal(etacal_table_key_count(t, 0), 0);
    assert_null(etacal_table_key_text(t, 2, 3));
    assert_null(etacal_table_key_text(t, 0, 0));
    assert_null(etacal_table_num(t, 3));
    const etacal_read_stats *st = etacal_table_stats(t);
    assert_int_equal(st->data_rows, 4);
    assert_int_equal(st->kept, 4);
    assert_int_equal(st->missing, 0);
    assert_int_equal(st->bad, 0);
    assert_int_equal(st->first_bad_line, 0);
    assert_int_equal(st->bytes, strlen(text));
}

static void test_read_rfc4180_quoting(void **state)
{
    fixture *f = *state;
    const char *text = "zone,\"pred_s\",actual_s\n"
                       "\"North, Old Town\",\"1800\",1943.25\n"
                       "\"say \"\"hi\"\"\",944.7,901.125\n"
                       "\"two\nlines\",2.385,3.5\n"
                       "\"\",61.875,77.5\n"
                       "plain,\"1.5e3\",\"1600.75\"\n";
    assert_int_equal(read_str(f, text, NULL), ETACAL_OK);
    const etacal_table *t = f->t;
    assert_int_equal(etacal_table_rows(t), 5);
    assert_int_equal(etacal_table_key_count(t, 2), 5);
    assert_string_equal(etacal_table_key_text(t, 2, 0), "North, Old Town");
    assert_string_equal(etacal_table_key_text(t, 2, 1), "say \"hi\"");
    assert_string_equal(etacal_table_key_text(t, 2, 2), "two\nlines");
    assert_string_equal(etacal_table_key_text(t, 2, 3), "");
    assert_string_equal(etacal_table_key_text(t, 2, 4), "plain");
    assert_same_double(etacal_table_num(t, 1)[0], 1800.0);
    assert_same_double(etacal_table_num(t, 1)[4], 1500.0);
    assert_same_double(etacal_table_num(t, 0)[4], 1600.75);
    assert_same_double(etacal_table_num(t, 0)[2], 3.5);
}

static void test_read_line_numbers_count_physical_lines(void **state)
{
    fixture *f = *state;
    /* The record of line 3 spans lines 3-5; the bad value sits on line 7. */
    const char *text = "zone,pred_s,actual_s\n"
                       "north,1800,1943.25\n"
                       "\"three\nphysical\nlines\",944.7,901.125\n"
                       "south,2.385,3.5\n"
                       "east,61.875,12abc\n";
    expect_error(f, text, NULL, ETACAL_EPARSE, 7, "column 'actual_s' is not numeric: '12abc'");
    /* The same with CRLF line ends (CRLF inside the quotes too). */
    const char *crlf = "zone,pred_s,actual_s\r\n"
                       "north,1800,1943.25\r\n"
                       "\"three\r\nphysical\r\nlines\",944.7,901.125\r\n"
                       "south,2.385,3.5\r\n"
                       "east,61.875,12abc\r\n";
    expect_error(f, crlf, NULL, ETACAL_EPARSE, 7, "column 'actual_s' is not numeric: '12abc'");
    /* And after blank lines. */
    const char *blank = "zone,pred_s,actual_s\n"
                        "\n"
                        "north,1800,1943.25\n"
                        "\n"
                        "\n"
                        "east,61.875,-4.5\n";
    expect_error(f, blank, NULL, ETACAL_EPARSE, 6, "column 'actual_s': duration is negative");
}

static void test_read_crlf(void **state)
{
    fixture *f = *state;
    const char *text = "zone,pred_s,actual_s\r\n"
                       "north,1800,1943.25\r\n"
                       "\"a\r\nb\",944.7,901.125\r\n";
    assert_int_equal(read_str(f, text, NULL), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 2);
    /* No CR left on the last field of a line or in the header name. */
    assert_same_double(etacal_table_num(f->t, 0)[0], 1943.25);
    assert_same_double(etacal_table_num(f->t, 0)[1], 901.125);
    assert_string_equal(etacal_table_key_text(f->t, 2, 0), "north");
    assert_string_equal(etacal_table_key_text(f->t, 2, 1), "a\r\nb");
}

static void test_read_bom_blank_lines_last_line(void **state)
{
    fixture *f = *state;
    const char *text = "\xEF\xBB\xBF"
                       "actual_s,pred_s,zone\n"
                       "1943.25,1800,north\n"
                       "\n"
                       "901.125,944.7,south\n"
                       "\n"
                       "3.5,2.385,east"; /* no newline at the end */
    assert_int_equal(read_str(f, text, NULL), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 3);
    assert_int_equal(etacal_table_stats(f->t)->data_rows, 3);
    assert_same_double(etacal_table_num(f->t, 0)[0], 1943.25);
    assert_same_double(etacal_table_num(f->t, 1)[2], 2.385);
    assert_string_equal(etacal_table_key_text(f->t, 2, 2), "east");
    /* A blank line (and a CRLF blank line) at the end. */
    const char *trail = "actual_s,pred_s,zone\r\n"
                        "1943.25,1800,north\r\n"
                        "\r\n"
                        "\n";
    assert_int_equal(read_str(f, trail, NULL), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 1);
    assert_int_equal(etacal_table_stats(f->t)->data_rows, 1);
    /* A header only: a table with no rows, not an error. */
    assert_int_equal(read_str(f, "actual_s,pred_s,zone\n", NULL), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 0);
    /* Without the BOM being dropped the first column would be missing. */
    expect_error(f, "\xEF\xBB\xBF\xEF\xBB\xBF" "actual_s,pred_s,zone\n1,2,z\n", NULL,
                 ETACAL_EINVAL, 1, "no column 'actual_s' in the header");
}

static void test_read_other_delimiters(void **state)
{
    fixture *f = *state;
    etacal_read_opts o = {0};
    o.delim = ';';
    const char *semi = "zone;pred_s;actual_s\n"
                       "\"Nord; Altstadt\";1800;1943.25\n"
                       "S\xC3\xBC" "d;944.7;901.125\n";
    assert_int_equal(read_str(f, semi, &o), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 2);
    assert_string_equal(etacal_table_key_text(f->t, 2, 0), "Nord; Altstadt");
    assert_string_equal(etacal_table_key_text(f->t, 2, 1), "S\xC3\xBC" "d");
    assert_same_double(etacal_table_num(f->t, 1)[1], 944.7);
    /* A decimal comma is not a number, even with ';' as the delimiter. */
    expect_error(f, "zone;pred_s;actual_s\nnorth;1800;1943,25\n", &o, ETACAL_EPARSE, 2,
                 "column 'actual_s' is not numeric: '1943,25' (a comma is neither a decimal point nor a thousands separator; write 1234.5)");
    o.delim = '\t';
    const char *tab = "zone\tpred_s\tactual_s\n"
                      "north, old\t1800\t1943.25\n"
                      "\"a\tb\"\t944.7\t901.125\n";
    assert_int_equal(read_str(f, tab, &o), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 2);
    assert_string_equal(etacal_table_key_text(f->t, 2, 0), "north, old");
    assert_string_equal(etacal_table_key_text(f->t, 2, 1), "a\tb");
    /* With a tab delimiter, a comma file is one column per line. */
    expect_error(f, "zone,pred_s,actual_s\nnorth,1800,1943.25\n", &o, ETACAL_EINVAL, 1,
                 "no column 'actual_s' in the header");
    /* Delimiters that cannot work. */
    static const char bad[] = {'"', '\n', '\r', ' '};
    for (size_t i = 0; i < sizeof bad; i++) {
        o.delim = bad[i];
        etacal_error_clear(&f->err);
        assert_int_equal(read_str(f, "zone,pred_s,actual_s\n", &o), ETACAL_EINVAL);
        assert_error(&f->err, ETACAL_EINVAL, "", "the delimiter cannot be a quote, space or newline");
        assert_null(f->t);
    }
}

static void test_read_header_errors(void **state)
{
    fixture *f = *state;
    expect_error(f, "zone,pred_s,actual\nnorth,1800,1943.25\n", NULL, ETACAL_EINVAL, 1,
                 "no column 'actual_s' in the header");
    /* The header is where it is, after blank lines. */
    expect_error(f, "\n\nzone,actual_s\nnorth,1943.25\n", NULL, ETACAL_EINVAL, 3,
                 "no column 'pred_s' in the header");
    expect_error(f, "actual_s,pred_s,zone,actual_s\n1,2,z,3\n", NULL, ETACAL_EPARSE, 1,
                 "column 'actual_s' appears twice in the header");
    /* A header name differing only in case or spaces is a different name. */
    expect_error(f, "Actual_s,pred_s,zone\n1,2,z\n", NULL, ETACAL_EINVAL, 1,
                 "no column 'actual_s' in the header");
    /* A duplicate of a column not asked for is fine. */
    assert_int_equal(read_str(f, "note,actual_s,note,pred_s,zone\nx,1943.25,y,1800,north\n", NULL),
                     ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 1);
    /* The same column named twice by the caller. */
    etacal_colspec twice[] = {std_cols[0], std_cols[1], std_cols[0]};
    tu_write_text(&f->dir, "in.csv", "actual_s,pred_s\n1,2\n", f->path, sizeof f->path);
    etacal_table *t = (etacal_table *)0x1;
    assert_int_equal(etacal_table_read_csv(f->path, twice, 3, NULL, &t, &f->err), ETACAL_EINVAL);
    assert_null(t);
    assert_error(&f->err, ETACAL_EINVAL, "", "column 'actual_s' is named twice");
}

static void test_read_row_errors(void **state)
{
    fixture *f = *state;
    const char *head = "zone,pred_s,actual_s\nnorth,1800,1943.25\n";
    char text[256];
    snprintf(text, sizeof text, "%ssouth,944.7\n", head);
    expect_error(f, text, NULL, ETACAL_EPARSE, 3, "2 fields, but the header has 3");
    snprintf(text, sizeof text, "%ssouth,944.7,901.125,17\n", head);
    expect_error(f, text, NULL, ETACAL_EPARSE, 3, "4 fields, but the header has 3");
    snprintf(text, sizeof text, "%ssouth,9 44.7,901.125\n", head);
    expect_error(f, text, NULL, ETACAL_EPARSE, 3, "column 'pred_s' is not numeric: '9 44.7' (no digit grouping inside a number; write 1234.5)");
    snprintf(text, sizeof text, "%ssouth,0x10,901.125\n", head);
    expect_error(f, text, NULL, ETACAL_EPARSE, 3, "column 'pred_s' is not numeric: '0x10' (hexadecimal numbers are not read)");
    snprintf(text, sizeof text, "%ssouth,944.7,-0.001\n", head);
    expect_error(f, text, NULL, ETACAL_EPARSE, 3, "column 'actual_s': duration is negative");
    snprintf(text, sizeof text, "%ssouth,-2.385,901.125\n", head);
    expect_error(f, text, NULL, ETACAL_EPARSE, 3, "column 'pred_s': prediction is negative");
    snprintf(text, sizeof text, "%ssouth,944.7,inf\n", head);
    expect_error(f, text, NULL, ETACAL_EPARSE, 3, "column 'actual_s': duration is not finite");
    snprintf(text, sizeof text, "%ssouth,-Infinity,901.125\n", head);
    expect_error(f, text, NULL, ETACAL_EPARSE, 3, "column 'pred_s': prediction is not finite");
    /* A long bad value is shown cut at 40 characters. */
    snprintf(text, sizeof text, "%ssouth,944.7,%s\n", head,
             "1234567890123456789012345678901234567890123456789x");
    expect_error(f, text, NULL, ETACAL_EPARSE, 3,
                 "column 'actual_s' is not numeric: '1234567890123456789012345678901234567890...'");
    /* -0 is not negative. */
    snprintf(text, sizeof text, "%ssouth,944.7,-0\n", head);
    assert_int_equal(read_str(f, text, NULL), ETACAL_OK);
    assert_true(etacal_table_num(f->t, 0)[1] == 0);
}

static void test_read_flags(void **state)
{
    fixture *f = *state;
    /* POSITIVE, and a column without flags that takes anything numeric. */
    const etacal_colspec cols[] = {
        {"pred_s", ETACAL_COL_NUM, ETACAL_NUM_POSITIVE, NULL},
        {"weight", ETACAL_COL_NUM, 0, NULL},
    };
    tu_write_text(&f->dir, "f.csv", "pred_s,weight\n2.385,-inf\n944.7,NA\n0,3\n", f->path,
                  sizeof f->path);
    assert_int_equal(etacal_table_read_csv(f->path, cols, 2, NULL, &f->t, &f->err), ETACAL_EPARSE);
    char where[700];
    assert_error(&f->err, ETACAL_EPARSE, tu_where(where, sizeof where, f->path, 4),
                 "column 'pred_s': value must be positive");
    tu_write_text(&f->dir, "f.csv", "pred_s,weight\n2.385,-inf\n944.7,NA\n", f->path, sizeof f->path);
    assert_int_equal(etacal_table_read_csv(f->path, cols, 2, NULL, &f->t, &f->err), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 2);
    const double *w = etacal_table_num(f->t, 1);
    assert_true(isinf(w[0]) && w[0] < 0);
    /* missing without SKIP_MISSING: kept as NaN */
    assert_true(isnan(w[1]));
    assert_int_equal(etacal_table_stats(f->t)->missing, 0);
}

static void test_read_quoting_errors(void **state)
{
    fixture *f = *state;
    expect_error(f, "zone,pred_s,actual_s\nnorth,1800,1943.25\n\nsouth,944.7,\"901.125\n", NULL,
                 ETACAL_EPARSE, 4, "unterminated quoted field");
    expect_error(f, "zone,pred_s,actual_s\nnorth,1800,1943.25\n\"two\nlines\",1,2\nsou\"th,944.7,901.125\n",
                 NULL, ETACAL_EPARSE, 5,
                 "malformed quoting: a quoted field must be quoted as a whole, with inner quotes "
                 "doubled");
    expect_error(f, "zone,pred_s,actual_s\n\"north\"x,1800,1943.25\n", NULL, ETACAL_EPARSE, 2,
                 "malformed quoting: a quoted field must be quoted as a whole, with inner quotes "
                 "doubled");
}

/* The first problem is the one reported: once the header (or a row) has
 * stopped the reader, a malformed quote further down the same read chunk
 * must not replace that error with its own. */
static void test_read_first_error_wins(void **state)
{
    fixture *f = *state;
    expect_error(f,
                 "zone,pred_s,actual\n"
                 "north,1800,1943.25\n"
                 "south,944.7,9\"01\n",
                 NULL, ETACAL_EINVAL, 1, "no column 'actual_s' in the header");
    expect_error(f,
                 "zone,pred_s,actual_s\n"
                 "north,1800,12abc\n"
                 "south,944.7,9\"01\n",
                 NULL, ETACAL_EPARSE, 2, "column 'actual_s' is not numeric: '12abc'");
}

static void test_read_empty_and_unreadable(void **state)
{
    fixture *f = *state;
    expect_error(f, "", NULL, ETACAL_EPARSE, 0, "empty file: expected a header row");
    expect_error(f, "\n\n\r\n", NULL, ETACAL_EPARSE, 0, "empty file: expected a header row");
    expect_error(f, "\xEF\xBB\xBF", NULL, ETACAL_EPARSE, 0, "empty file: expected a header row");
    /* No such file, and a directory. */
    char missing[700];
    tu_path(missing, sizeof missing, &f->dir, "no-such.csv");
    etacal_table *t = (etacal_table *)0x1;
    assert_int_equal(etacal_table_read_csv(missing, std_cols, 3, NULL, &t, &f->err), ETACAL_EIO);
    assert_null(t);
    assert_error(&f->err, ETACAL_EIO, missing, "cannot open: No such file or directory");
    assert_int_equal(etacal_table_read_csv(f->dir.path, std_cols, 3, NULL, &t, &f->err), ETACAL_EIO);
    assert_error(&f->err, ETACAL_EIO, f->dir.path, "is a directory");
}

static void test_read_missing_values_skipped(void **state)
{
    fixture *f = *state;
    const char *text = "zone,pred_s,actual_s\n"
                       "north,1800,1943.25\n"
                       "south,944.7,NA\n"
                       "east,,901.125\n"
                       "north,2.385,null\n"
                       "north,NaN,3\n"
                       "south,61.875,77.5\n"
                       "west,\"\",  \n";
    assert_int_equal(read_str(f, text, NULL), ETACAL_OK);
    const etacal_read_stats *st = etacal_table_stats(f->t);
    assert_int_equal(st->data_rows, 7);
    assert_int_equal(st->kept, 2);
    assert_int_equal(st->missing, 5);
    assert_int_equal(st->bad, 0);
    assert_int_equal(etacal_table_rows(f->t), 2);
    assert_same_double(etacal_table_num(f->t, 0)[0], 1943.25);
    assert_same_double(etacal_table_num(f->t, 0)[1], 77.5);
    assert_same_double(etacal_table_num(f->t, 1)[1], 61.875);
    /* A malformed value beats a missing one in the same row. */
    expect_error(f, "zone,pred_s,actual_s\nnorth,NA,12abc\n", NULL, ETACAL_EPARSE, 2,
                 "column 'actual_s' is not numeric: '12abc'");
    expect_error(f, "zone,pred_s,actual_s\nnorth,12abc,NA\n", NULL, ETACAL_EPARSE, 2,
                 "column 'pred_s' is not numeric: '12abc'");
}

/* A row left out (missing value) leaves no trace in the columns, the key
 * dictionaries included (csv_read.c's own promise): the key of a skipped row
 * is not a value of the table's column. */
static void test_read_skipped_rows_leave_no_key(void **state)
{
    fixture *f = *state;
    const char *text = "zone,pred_s,actual_s\n"
                       "north,1800,1943.25\n"
                       "ghost,944.7,NA\n"
                       "south,61.875,77.5\n";
    assert_int_equal(read_str(f, text, NULL), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), 2);
    const uint32_t *z = key_ids_of(f->t, 2);
    assert_string_equal(etacal_table_key_text(f->t, 2, z[0]), "north");
    assert_string_equal(etacal_table_key_text(f->t, 2, z[1]), "south");
    size_t count = etacal_table_key_count(f->t, 2);
    if (count != 2)
        fail_msg("key_count = %zu for a column whose rows hold 2 distinct values (id %u = '%s' "
                 "comes from the skipped row)",
                 count, 1u, etacal_table_key_text(f->t, 2, 1));
    assert_int_equal(z[1], 1);
}

static void test_read_bad_rows_skip(void **state)
{
    fixture *f = *state;
    const char *text = "zone,pred_s,actual_s\n"  /* 1 */
                       "north,1800,1943.25\n"    /* 2 */
                       "south,12abc,901.125\n"   /* 3 bad */
                       "east,2.385,3.5\n"        /* 4 */
                       "north,NA,3.5\n"          /* 5 missing */
                       "south,944.7\n"           /* 6 bad (2 fields) */
                       "*,61.875,77.5\n"         /* 7 bad ('*') */
                       "west,100.5,-3\n"         /* 8 bad (negative) */
                       "east,17.125,20.25\n"     /* 9 */
                       "north,30.5,31.75\n";     /* 10 */
    etacal_read_opts o = {0};
    o.bad_rows = ETACAL_BAD_ROWS_SKIP;
    o.max_bad_share = 0.5;
    assert_int_equal(read_str(f, text, &o), ETACAL_OK);
    const etacal_read_stats *st = etacal_table_stats(f->t);
    assert_int_equal(st->data_rows, 9);
    assert_int_equal(st->bad, 4);
    assert_int_equal(st->missing, 1);
    assert_int_equal(st->kept, 4);
    assert_int_equal(st->first_bad_line, 3);
    assert_string_equal(st->first_bad_msg, "column 'pred_s' is not numeric: '12abc'");
    assert_int_equal(etacal_table_rows(f->t), 4);
    const double *y = etacal_table_num(f->t, 0);
    assert_same_double(y[0], 1943.25);
    assert_same_double(y[1], 3.5);
    assert_same_double(y[2], 20.25);
    assert_same_double(y[3], 31.75);
    /* 4 of 9 is more than a share of 0.4: an error at the first bad line. */
    o.max_bad_share = 0.4;
    expect_error(f, text, &o, ETACAL_EPARSE, 3,
                 "column 'pred_s' is not numeric: '12abc' (4 of 9 data rows are malformed, more "
                 "than the allowed share 0.4)");
    /* A share of exactly 4/9 is allowed ("more than" is the error). */
    o.max_bad_share = 4.0 / 9.0;
    assert_int_equal(read_str(f, text, &o), ETACAL_OK);
    /* Share 0 with skip: any bad row is an error. */
    o.max_bad_share = 0;
    expect_error(f, text, &o, ETACAL_EPARSE, 3,
                 "column 'pred_s' is not numeric: '12abc' (4 of 9 data rows are malformed, more "
                 "than the allowed share 0)");
    /* Skip does not cover a broken header or broken quoting. */
    o.max_bad_share = 1;
    expect_error(f, "zone,pred_s,actual_s,zone\nnorth,1,2,x\n", &o, ETACAL_EPARSE, 1,
                 "column 'zone' appears twice in the header");
    expect_error(f, "zone,pred_s,actual_s\nnorth,1,\"2\n", &o, ETACAL_EPARSE, 2,
                 "unterminated quoted field");
}

static void test_read_star_key_rejected(void **state)
{
    fixture *f = *state;
    expect_error(f, "zone,pred_s,actual_s\nnorth,1800,1943.25\n*,944.7,901.125\n", NULL,
                 ETACAL_EPARSE, 3,
                 "'*' is reserved for \"all values\" and cannot be a value of 'zone'");
    /* Quoted, it is still the value '*'. */
    expect_error(f, "zone,pred_s,actual_s\n\"*\",944.7,901.125\n", NULL, ETACAL_EPARSE, 2,
                 "'*' is reserved for \"all values\" and cannot be a value of 'zone'");
    /* Other values with a star are fine. */
    assert_int_equal(read_str(f, "zone,pred_s,actual_s\n**,1,2\n*north,3,4\n", NULL), ETACAL_OK);
    assert_string_equal(etacal_table_key_text(f->t, 2, 0), "**");
    assert_string_equal(etacal_table_key_text(f->t, 2, 1), "*north");
}

static void test_read_many_keys(void **state)
{
    fixture *f = *state;
    /* 5000 distinct keys (the dictionary rehashes many times), each seen
     * twice, in a file of 10000 rows. */
    size_t cap = 10000 * 40 + 64, n = 0;
    char *text = malloc(cap);
    assert_non_null(text);
    n += (size_t)snprintf(text + n, cap - n, "zone,pred_s,actual_s\n");
    for (int i = 0; i < 10000; i++)
        n += (size_t)snprintf(text + n, cap - n, "z%d,%d.5,%d.25\n", (i * 7) % 5000, i, i + 3);
    assert_int_equal(read_text(f, text, n, NULL), ETACAL_OK);
    free(text);
    assert_int_equal(etacal_table_rows(f->t), 10000);
    assert_int_equal(etacal_table_key_count(f->t, 2), 5000);
    const uint32_t *z = key_ids_of(f->t, 2);
    char want[32];
    for (int i = 0; i < 10000; i++) {
        snprintf(want, sizeof want, "z%d", (i * 7) % 5000);
        assert_string_equal(etacal_table_key_text(f->t, 2, z[i]), want);
        if (i < 5000)
            assert_int_equal(z[i], (uint32_t)i); /* first appearance */
        else
            assert_int_equal(z[i], z[i - 5000]);
    }
    assert_same_double(etacal_table_num(f->t, 1)[9999], 9999.5);
}

typedef struct progress_log {
    int calls;
    uint64_t last_done, total;
    int monotone;
} progress_log;

static void on_progress(void *ud, uint64_t done, uint64_t total)
{
    progress_log *p = ud;
    if (done < p->last_done)
        p->monotone = 0;
    p->last_done = done;
    p->total = total;
    p->calls++;
}

/* Over 1 MiB, so the reader works through several chunks: records,
 * quoted newlines and CRLF pairs end up split across chunk boundaries. */
static void test_read_across_chunks(void **state)
{
    fixture *f = *state;
    size_t rows = 45000, cap = rows * 48 + 128, n = 0;
    char *text = malloc(cap);
    assert_non_null(text);
    n += (size_t)snprintf(text + n, cap - n, "zone,pred_s,actual_s\r\n");
    for (size_t i = 0; i < rows; i++)
        n += (size_t)snprintf(text + n, cap - n, "\"z%zu\r\nx\",%zu.125,%zu.5\r\n", i % 97, i,
                              i + 7);
    assert_true(n > (1u << 20) + 1000);
    progress_log pl = {0, 0, 0, 1};
    etacal_read_opts o = {0};
    o.progress = on_progress;
    o.progress_ud = &pl;
    assert_int_equal(read_text(f, text, n, &o), ETACAL_OK);
    assert_int_equal(etacal_table_rows(f->t), rows);
    assert_int_equal(etacal_table_key_count(f->t, 2), 97);
    assert_string_equal(etacal_table_key_text(f->t, 2, 96), "z96\r\nx");
    const double *p = etacal_table_num(f->t, 1), *y = etacal_table_num(f->t, 0);
    for (size_t i = 0; i < rows; i += 997) {
        assert_close(p[i], (double)i + 0.125, 1e-15);
        assert_close(y[i], (double)i + 7.5, 1e-15);
    }
    assert_int_equal(etacal_table_stats(f->t)->bytes, n);
    assert_true(pl.calls >= 2);
    assert_true(pl.monotone);
    assert_int_equal(pl.last_done, n);
    assert_int_equal(pl.total, n);
    /* A bad value in the last record: each record takes 2 physical lines,
     * so record i (from 0) starts on line 2 + 2 i. */
    n += (size_t)snprintf(text + n, cap - n, "\"last\",1.5,oops\r\n");
    expect_error(f, text, NULL, ETACAL_EPARSE, 2 + 2 * rows, "column 'actual_s' is not numeric: 'oops'");
    free(text);
}

/* csvstream in raw mode hands each record's exact bytes and its line. */
typedef struct raw_log {
    size_t nrec;
    size_t lines[8];
    size_t nfields[8];
    char raw[8][64];
    size_t rawlen[8];
    int stop_at; /* stop after this record (1-based), 0: never */
    etacal_error *err;
} raw_log;

static void raw_field(void *ud, size_t col, const char *s, size_t len)
{
    (void)ud;
    (void)col;
    (void)s;
    (void)len;
}

static int raw_row(void *ud, size_t nfields, size_t line, const char *raw, size_t rawlen)
{
    raw_log *l = ud;
    if (l->nrec < 8) {
        l->lines[l->nrec] = line;
        l->nfields[l->nrec] = nfields;
        l->rawlen[l->nrec] = rawlen;
        if (raw && rawlen < sizeof l->raw[0])
            memcpy(l->raw[l->nrec], raw, rawlen);
    }
    l->nrec++;
    if (l->stop_at && (int)l->nrec == l->stop_at) {
        etacal_error_set(l->err, ETACAL_ENUM, "here", "stopped at record %zu", l->nrec);
        return 1;
    }
    return 0;
}

static void test_csvstream_raw_records(void **state)
{
    fixture *f = *state;
    const char text[] = "a,b\r\n\"x\ny\",\"q\"\"\"\n\n3,4";
    tu_write_bytes(&f->dir, "raw.csv", text, sizeof text - 1, f->path, sizeof f->path);
    raw_log l;
    memset(&l, 0, sizeof l);
    l.err = &f->err;
    csvstream_cb cb = {raw_field, raw_row, &l, NULL, NULL};
    uint64_t bytes = 0;
    assert_int_equal(csvstream_run(f->path, ',', 1, &cb, &bytes, &f->err), ETACAL_OK);
    assert_int_equal(bytes, sizeof text - 1);
    assert_int_equal(l.nrec, 3);
    assert_int_equal(l.lines[0], 1);
    assert_int_equal(l.lines[1], 2);
    assert_int_equal(l.lines[2], 5);
    assert_int_equal(l.nfields[0], 2);
    assert_int_equal(l.nfields[1], 2);
    assert_int_equal(l.rawlen[0], 5);
    assert_memory_equal(l.raw[0], "a,b\r\n", 5);
    assert_int_equal(l.rawlen[1], 12);
    assert_memory_equal(l.raw[1], "\"x\ny\",\"q\"\"\"\n", 12);
    assert_int_equal(l.rawlen[2], 3);
    assert_memory_equal(l.raw[2], "3,4", 3);
    /* Stopping: the callback's error comes back as the status. */
    memset(&l, 0, sizeof l);
    l.err = &f->err;
    l.stop_at = 2;
    etacal_error_clear(&f->err);
    assert_int_equal(csvstream_run(f->path, ',', 1, &cb, NULL, &f->err), ETACAL_ENUM);
    assert_error(&f->err, ETACAL_ENUM, "here", "stopped at record 2");
    assert_int_equal(l.nrec, 2);
    /* A bare CR in raw mode. */
    const char cr[] = "a,b\r3,4\n";
    tu_write_bytes(&f->dir, "cr.csv", cr, sizeof cr - 1, f->path, sizeof f->path);
    memset(&l, 0, sizeof l);
    l.err = &f->err;
    assert_int_equal(csvstream_run(f->path, ',', 1, &cb, NULL, &f->err), ETACAL_EPARSE);
    char where[700];
    assert_error(&f->err, ETACAL_EPARSE, tu_where(where, sizeof where, f->path, 1),
                 "a bare carriage return ends a line; use LF or CRLF line endings");
}

int main(void)
{
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
    const struct CMUnitTest tests[] = {
        T(test_read_basic),
        T(test_read_rfc4180_quoting),
        T(test_read_line_numbers_count_physical_lines),
        T(test_read_crlf),
        T(test_read_bom_blank_lines_last_line),
        T(test_read_other_delimiters),
        T(test_read_header_errors),
        T(test_read_row_errors),
        T(test_read_flags),
        T(test_read_quoting_errors),
        T(test_read_first_error_wins),
        T(test_read_empty_and_unreadable),
        T(test_read_missing_values_skipped),
        T(test_read_skipped_rows_leave_no_key),
        T(test_read_bad_rows_skip),
        T(test_read_star_key_rejected),
        T(test_read_many_keys),
        T(test_read_across_chunks),
        T(test_csvstream_raw_records),
    };
#undef T
    return cmocka_run_group_tests(tests, NULL, NULL);
}
