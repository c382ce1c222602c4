/* SPDX-License-Identifier: GPL-3.0-or-later */
/*
 * tokenize.c - "libcsv alone" baseline for the etacal benchmarks.
 *
 * Reads a CSV file with libcsv in 1 MiB fread chunks.  The field and row
 * callbacks only count fields, rows and field bytes (and fold the first
 * byte of each field into a checksum) so the compiler cannot drop them.
 * The time this takes is the floor for any tool that tokenizes CSV with
 * libcsv; bench/run.sh compares `etacal fit` against it.
 *
 * Build:  cc -std=c11 -O2 bench/tokenize.c -o build/bench/tokenize -lcsv
 *
 * Copyright (C) 2026 The etacal authors.
 * This program is free software: you can redistribute it and/or modify it
 * under the terms of the GNU General Public License as published by the Free
 * Software Foundation, either version 3 of the License, or (at your option)
 * any later version.  It is distributed WITHOUT ANY WARRANTY; see the GNU
 * General Public License for more details.
 */

#include <csv.h>
#include <errno.h>
#include <getopt.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define PROG "etacal-tokenize"
#define CHUNK (1u << 20)

typedef struct {
    uint64_t fields;
    uint64_t rows;
    uint64_t bytes;
    uint64_t check;
} counts_t;

static void on_field(void *s, size_t len, void *data)
{
    counts_t *c = data;
    c->fields++;
    c->bytes += len;
    if (len > 0)
        c->check = c->check * 31 + *(const unsigned char *)s;
}

static void on_row(int term, void *data)
{
    counts_t *c = data;
    (void)term;
    c->rows++;
}

static void usage(FILE *fp)
{
    fprintf(fp,
        "Usage: tokenize [OPTION]... FILE\n"
        "Tokenize the CSV file FILE ('-' = standard input) with libcsv in\n"
        "1 MiB chunks and print the number of rows, fields and field bytes.\n"
        "\n"
        "Options:\n"
        "  -h, --help   show this help and exit\n"
        "\n"
        "Exit status: 0 on success, 1 on a read or parse error, 2 on a usage\n"
        "error.\n");
}

static void usage_error(const char *msg, const char *arg)
{
    if (arg)
        fprintf(stderr, PROG ": %s: %s\n", msg, arg);
    else
        fprintf(stderr, PROG ": %s\n", msg);
    fprintf(stderr, "Try 'tokenize --help' for more information.\n");
    exit(2);
}

int main(int argc, char **argv)
{
    static const struct option longopts[] = {
        { "help", no_argument, NULL, 'h' },
        { NULL, 0, NULL, 0 }
    };
    struct csv_parser p;
    counts_t c = { 0, 0, 0, 0 };
    const char *path;
    FILE *fp;
    char *buf;
    size_t n;
    int ch, rc = 0;

    opterr = 0;
    while ((ch = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        switch (ch) {
        case 'h':
            usage(stdout);
            return fflush(stdout) == 0 ? 0 : 1;
        default:
            usage_error("unknown option", argv[optind - 1]);
        }
    }
    if (argc - optind != 1)
        usage_error(argc - optind < 1 ? "missing FILE" : "too many arguments",
                    NULL);
    path = argv[optind];

    if (strcmp(path, "-") == 0) {
        fp = stdin;
    } else {
        fp = fopen(path, "rb");
        if (!fp) {
            fprintf(stderr, PROG ": cannot open %s: %s\n", path,
                    strerror(errno));
            return 1;
        }
    }
    buf = malloc(CHUNK);
    if (!buf || csv_init(&p, 0) != 0) {
        fprintf(stderr, PROG ": out of memory\n");
        return 1;
    }

    while ((n = fread(buf, 1, CHUNK, fp)) > 0) {
        if (csv_parse(&p, buf, n, on_field, on_row, &c) != n) {
            fprintf(stderr, PROG ": %s: %s\n", path,
                    csv_strerror(csv_error(&p)));
            rc = 1;
            break;
        }
    }
    if (rc == 0 && ferror(fp)) {
        fprintf(stderr, PROG ": error reading %s: %s\n", path,
                strerror(errno));
        rc = 1;
    }
    if (rc == 0 && csv_fini(&p, on_field, on_row, &c) != 0) {
        fprintf(stderr, PROG ": %s: %s\n", path,
                csv_strerror(csv_error(&p)));
        rc = 1;
    }
    csv_free(&p);
    free(buf);
    if (fp != stdin && fclose(fp) != 0 && rc == 0) {
        fprintf(stderr, PROG ": error closing %s: %s\n", path,
                strerror(errno));
        rc = 1;
    }

    if (rc == 0) {
        printf("rows %llu fields %llu bytes %llu check %llx\n",
               (unsigned long long)c.rows, (unsigned long long)c.fields,
               (unsigned long long)c.bytes, (unsigned long long)c.check);
        if (fflush(stdout) != 0) {
            fprintf(stderr, PROG ": error writing standard output: %s\n",
                    strerror(errno));
            rc = 1;
        }
    }
    return rc;
}
