/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_parallel_read.c: a large file read in two halves at once must give
 * exactly what a one-thread read gives: the same rows in the same order, the
 * same key ids, the same counts, and errors at the same FILE:LINE, also when
 * quoted fields hold line feeds and the bad row lies in the second half. */
#define _GNU_SOURCE
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "etacal/etacal.h"

static char dir[64], path[128];

/* Writes about 20 MB; the row with index bad_at (if not SIZE_MAX) gets a
 * non-numeric actual.  Returns the physical line of that row. */
static int many_keys; /* 1: 40000 zone values in each half, 80000 in all */

static size_t write_file(size_t rows, size_t bad_at, size_t bad_at2)
{
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    size_t line = 1, bad_line = 0;
    fprintf(fp, "zone,note,pred,actual\n");
    uint64_t x = 88172645463325252ull;
    for (size_t i = 0; i < rows; i++) {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        line++;
        unsigned z = (unsigned)(x % 37);
        if (many_keys)
            fprintf(fp, "k%zu,", i < rows / 2 ? i % 40000 : 40000 + i % 40000);
        else if (z % 5 == 0)
            fprintf(fp, "\"zone %u, south\",", z);
        else
            fprintf(fp, "z%u,", z);
        if (x % 101 == 0) {
            fprintf(fp, "\"two\nlines\",");
            line++; /* the record goes on on the next physical line */
        } else {
            fprintf(fp, "n%u,", (unsigned)(x % 7));
        }
        double pred = 600 + (double)(x % 18000) / 10;
        if (i == bad_at || i == bad_at2) {
            if (!bad_line)
                bad_line = line;
            fprintf(fp, "%.1f,soon\n", pred);
        } else {
            fprintf(fp, "%.1f,%.1f\n", pred, pred + (double)((x >> 20) % 9000) / 10 - 300);
        }
    }
    assert_int_equal(fclose(fp), 0);
    /* large enough for the two-part read (16 MiB, csv_read.c) */
    struct stat st;
    assert_int_equal(stat(path, &st), 0);
    assert_true(st.st_size >= (off_t)16 << 20);
    return bad_line;
}

static const etacal_colspec cols[] = {
    {"actual", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
    {"pred", ETACAL_COL_NUM, ETACAL_NUM_SKIP_MISSING, NULL},
    {"zone", ETACAL_COL_KEY, 0, NULL},
    {"note", ETACAL_COL_KEY, 0, NULL},
};

static int read_with(int threads, int skip, etacal_table **t, etacal_error *err)
{
    etacal_read_opts o = {0};
    o.threads = threads;
    o.bad_rows = skip ? ETACAL_BAD_ROWS_SKIP : ETACAL_BAD_ROWS_ERROR;
    o.max_bad_share = 0.5;
    etacal_error_clear(err);
    return etacal_table_read_csv(path, cols, 4, &o, t, err);
}

static int setup(void **state)
{
    (void)state;
    snprintf(dir, sizeof dir, "/tmp/etacal-par-XXXXXX");
    if (!mkdtemp(dir))
        return -1;
    snprintf(path, sizeof path, "%s/big.csv", dir);
    return 0;
}

static int teardown(void **state)
{
    (void)state;
    unlink(path);
    rmdir(dir);
    return 0;
}

static void test_same_rows(void **state)
{
    (void)state;
    const size_t rows = 1000000;
    write_file(rows, SIZE_MAX, SIZE_MAX);
    etacal_table *a = NULL, *b = NULL;
    etacal_error err;
    assert_int_equal(read_with(1, 0, &a, &err), ETACAL_OK);
    assert_int_equal(read_with(ETACAL_THREADS_AUTO, 0, &b, &err), ETACAL_OK);
    assert_int_equal(etacal_table_rows(a), rows);
    assert_int_equal(etacal_table_rows(b), rows);
    assert_memory_equal(etacal_table_num(a, 0), etacal_table_num(b, 0), rows * sizeof(double));
    assert_memory_equal(etacal_table_num(a, 1), etacal_table_num(b, 1), rows * sizeof(double));
    for (size_t c = 2; c < 4; c++) {
        assert_int_equal(etacal_table_key_count(a, c), etacal_table_key_count(b, c));
        int wa = 0, wb = 0;
        const void *ka = etacal_table_key_ids(a, c, &wa), *kb = etacal_table_key_ids(b, c, &wb);
        assert_int_equal(wa, wb);
        assert_memory_equal(ka, kb, rows * (size_t)wa);
        for (uint32_t id = 0; id < etacal_table_key_count(a, c); id++)
            assert_string_equal(etacal_table_key_text(a, c, id), etacal_table_key_text(b, c, id));
    }
    const etacal_read_stats *sa = etacal_table_stats(a), *sb = etacal_table_stats(b);
    assert_int_equal(sa->data_rows, sb->data_rows);
    assert_int_equal(sa->kept, sb->kept);
    assert_true(sa->bytes == sb->bytes);
    /* the quoted key with a comma and the note with a line feed survive */
    int found = 0;
    for (uint32_t id = 0; id < etacal_table_key_count(b, 3); id++)
        found |= strcmp(etacal_table_key_text(b, 3, id), "two\nlines") == 0;
    assert_true(found);
    etacal_table_destroy(a);
    etacal_table_destroy(b);
}

static void test_error_line_second_half(void **state)
{
    (void)state;
    size_t line = write_file(1000000, 950123, SIZE_MAX);
    char want[160];
    snprintf(want, sizeof want, "%s:%zu", path, line);
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(read_with(1, 0, &t, &err), ETACAL_EPARSE);
    assert_string_equal(err.where, want);
    assert_int_equal(read_with(ETACAL_THREADS_AUTO, 0, &t, &err), ETACAL_EPARSE);
    assert_string_equal(err.where, want);
    assert_non_null(strstr(err.msg, "not numeric"));
    assert_null(t);
}

static void test_first_error_wins(void **state)
{
    (void)state;
    size_t line = write_file(1000000, 20011, 990001);
    char want[160];
    snprintf(want, sizeof want, "%s:%zu", path, line);
    etacal_table *t = NULL;
    etacal_error err;
    assert_int_equal(read_with(ETACAL_THREADS_AUTO, 0, &t, &err), ETACAL_EPARSE);
    assert_string_equal(err.where, want);
    /* skipped and counted the same way by both reads */
    etacal_table *a = NULL, *b = NULL;
    assert_int_equal(read_with(1, 1, &a, &err), ETACAL_OK);
    assert_int_equal(read_with(ETACAL_THREADS_AUTO, 1, &b, &err), ETACAL_OK);
    assert_int_equal(etacal_table_stats(a)->bad, 2);
    assert_int_equal(etacal_table_stats(b)->bad, 2);
    assert_int_equal(etacal_table_stats(a)->first_bad_line, line);
    assert_int_equal(etacal_table_stats(b)->first_bad_line, line);
    assert_int_equal(etacal_table_rows(b), 1000000 - 2);
    etacal_table_destroy(a);
    etacal_table_destroy(b);
}

/* More than 65536 distinct values: ids switch from 16 to 32 bits, in a
 * one-thread read while reading and in a two-part read when the halves
 * (40000 values each) are merged. */
static void test_wide_keys(void **state)
{
    (void)state;
    const size_t rows = 1000000;
    many_keys = 1;
    write_file(rows, SIZE_MAX, SIZE_MAX);
    many_keys = 0;
    etacal_table *a = NULL, *b = NULL;
    etacal_error err;
    assert_int_equal(read_with(1, 0, &a, &err), ETACAL_OK);
    assert_int_equal(read_with(ETACAL_THREADS_AUTO, 0, &b, &err), ETACAL_OK);
    assert_int_equal(etacal_table_key_count(a, 2), 80000);
    assert_int_equal(etacal_table_key_count(b, 2), 80000);
    int wa = 0, wb = 0;
    const void *ka = etacal_table_key_ids(a, 2, &wa), *kb = etacal_table_key_ids(b, 2, &wb);
    assert_int_equal(wa, 4);
    assert_int_equal(wb, 4);
    assert_memory_equal(ka, kb, rows * 4);
    assert_string_equal(etacal_table_key_text(b, 2, etacal_table_key_id(b, 2, rows - 1)), "k79999");
    assert_string_equal(etacal_table_key_text(b, 2, etacal_table_key_id(b, 2, 12345)), "k12345");
    /* a column with few values stays narrow */
    etacal_table_key_ids(b, 3, &wb);
    assert_int_equal(wb, 2);
    etacal_table_destroy(a);
    etacal_table_destroy(b);
}

/* The middle of the file falls inside a quoted field that holds many line
 * feeds: the two-part read must notice and read the file whole. */
static void test_split_inside_quotes(void **state)
{
    (void)state;
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    fprintf(fp, "zone,note,pred,actual\n");
    size_t rows = 0;
    for (; rows < 300000; rows++)
        fprintf(fp, "z%zu,n,%zu.5,%zu.25\n", rows % 7, 600 + rows % 900, 610 + rows % 977);
    fprintf(fp, "zq,\"");
    for (int i = 0; i < 400000; i++)
        fprintf(fp, "line %d of a long note\n", i);
    fprintf(fp, "\",700,710\n");
    rows++;
    for (size_t i = 0; i < 50000; i++, rows++)
        fprintf(fp, "z%zu,n,%zu.5,%zu.25\n", i % 7, 600 + i % 900, 610 + i % 977);
    fprintf(fp, "z1,n,700,oops\n");
    assert_int_equal(fclose(fp), 0);
    struct stat st;
    assert_int_equal(stat(path, &st), 0);
    assert_true(st.st_size >= (off_t)16 << 20);
    etacal_table *a = NULL, *b = NULL;
    etacal_error ea, eb;
    /* the bad last row: both reads name the same physical line */
    assert_int_equal(read_with(1, 0, &a, &ea), ETACAL_EPARSE);
    assert_int_equal(read_with(ETACAL_THREADS_AUTO, 0, &b, &eb), ETACAL_EPARSE);
    assert_string_equal(ea.where, eb.where);
    char want[160];
    snprintf(want, sizeof want, "%s:%zu", path, (size_t)(1 + 300000 + 400001 + 50000 + 1));
    assert_string_equal(eb.where, want);
    /* skipping it, the same rows either way */
    assert_int_equal(read_with(1, 1, &a, &ea), ETACAL_OK);
    assert_int_equal(read_with(ETACAL_THREADS_AUTO, 1, &b, &eb), ETACAL_OK);
    assert_int_equal(etacal_table_rows(a), rows);
    assert_int_equal(etacal_table_rows(b), rows);
    assert_memory_equal(etacal_table_num(a, 0), etacal_table_num(b, 0), rows * sizeof(double));
    etacal_table_destroy(a);
    etacal_table_destroy(b);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_same_rows),
        cmocka_unit_test(test_error_line_second_half),
        cmocka_unit_test(test_first_error_wins),
        cmocka_unit_test(test_wide_keys),
        cmocka_unit_test(test_split_inside_quotes),
    };
    return cmocka_run_group_tests_name("parallel_read", tests, setup, teardown);
}
