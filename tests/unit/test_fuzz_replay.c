/* SPDX-License-Identifier: GPL-3.0-or-later */
/* test_fuzz_replay.c: every seed of the fuzz corpora and every input a
 * fuzzer once crashed on (tests/fuzz/corpus/<target>/,
 * tests/fuzz/regress/<target>/) run through the same entry points as the
 * libFuzzer targets, in the normal build: regressions stay fixed even
 * where clang is missing, and `make asan` replays them under ASan/UBSan.
 * A target aborts when one of its oracles fails. */
#define _GNU_SOURCE
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

#include <dirent.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#define ETACAL_FUZZ_REPLAY 1
#include "../fuzz/fuzz_csv.c"
#include "../fuzz/fuzz_quotes.c"
#include "../fuzz/fuzz_time.c"

/* Runs fn on every regular file of dir; returns how many there were. */
static size_t replay_dir(const char *dir, int (*fn)(const uint8_t *, size_t))
{
    DIR *d = opendir(dir);
    if (!d)
        return 0;
    size_t count = 0;
    struct dirent *e;
    while ((e = readdir(d)) != NULL) {
        if (e->d_name[0] == '.')
            continue;
        char path[4096];
        snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        struct stat st;
        if (stat(path, &st) != 0 || !S_ISREG(st.st_mode))
            continue;
        FILE *fp = fopen(path, "rb");
        assert_non_null(fp);
        uint8_t *buf = malloc((size_t)st.st_size + 1);
        assert_non_null(buf);
        size_t got = fread(buf, 1, (size_t)st.st_size, fp);
        fclose(fp);
        assert_int_equal(got, (size_t)st.st_size);
        fn(buf, got);
        free(buf);
        count++;
    }
    closedir(d);
    return count;
}

static void replay(const char *target, int (*fn)(const uint8_t *, size_t))
{
    char dir[256];
    snprintf(dir, sizeof dir, "tests/fuzz/corpus/%s", target);
    size_t seeds = replay_dir(dir, fn);
    snprintf(dir, sizeof dir, "tests/fuzz/regress/%s", target);
    size_t regress = replay_dir(dir, fn);
    printf("fuzz replay %s: %zu seeds, %zu regression inputs\n", target, seeds, regress);
    /* run from the top of the tree (make unit): the seed corpus is there */
    assert_true(seeds > 0);
}

static void test_replay_csv(void **state)
{
    (void)state;
    replay("csv", fuzz_csv_one);
}

static void test_replay_quotes(void **state)
{
    (void)state;
    replay("quotes", fuzz_quotes_one);
}

static void test_replay_time(void **state)
{
    (void)state;
    replay("time", fuzz_time_one);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_replay_csv),
        cmocka_unit_test(test_replay_quotes),
        cmocka_unit_test(test_replay_time),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
