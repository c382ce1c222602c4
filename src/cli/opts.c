/* SPDX-License-Identifier: GPL-3.0-or-later */
/* opts.c: parsing the option values every command shares, error and
 * progress reporting, and the aligned text table used by text output. */
#include "cli.h"


#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <getopt.h>
#include <unistd.h>

int usage_error(const char *cmd, const char *fmt, ...)
{
    va_list ap;
    fprintf(stderr, "etacal: %s%s", cmd ? cmd : "", cmd ? ": " : "");
    va_start(ap, fmt);
    vfprintf(stderr, fmt, ap);
    va_end(ap);
    fprintf(stderr, "\nTry 'etacal %s%s--help'.\n", cmd ? cmd : "", cmd ? " " : "");
    return EXIT_USAGE;
}

int report_error(const etacal_error *err)
{
    if (err->where[0])
        fprintf(stderr, "etacal: %s: %s\n", err->where, err->msg);
    else
        fprintf(stderr, "etacal: %s\n", err->msg);
    return EXIT_DATA;
}

int parse_delim(const char *s, char *out)
{
    if (strcmp(s, "comma") == 0 || strcmp(s, ",") == 0)
        *out = ',';
    else if (strcmp(s, "semicolon") == 0 || strcmp(s, ";") == 0)
        *out = ';';
    else if (strcmp(s, "tab") == 0 || strcmp(s, "\t") == 0 || strcmp(s, "\\t") == 0)
        *out = '\t';
    else if (strcmp(s, "pipe") == 0 || strcmp(s, "|") == 0)
        *out = '|';
    else
        return -1;
    return 0;
}

int parse_bad_rows(const char *s, int *out)
{
    if (strcmp(s, "error") == 0)
        *out = ETACAL_BAD_ROWS_ERROR;
    else if (strcmp(s, "skip") == 0)
        *out = ETACAL_BAD_ROWS_SKIP;
    else
        return -1;
    return 0;
}

static int parse_double(const char *s, double *out)
{
    return etacal_num_parse(s, strlen(s), out) == ETACAL_NUM_VALUE && isfinite(*out) ? 0 : -1;
}

int parse_share(const char *s, double *out)
{
    return parse_double(s, out) == 0 && *out >= 0 && *out <= 1 ? 0 : -1;
}

int parse_seconds(const char *s, double *out)
{
    return parse_double(s, out) == 0 && *out >= 0 ? 0 : -1;
}

int parse_size(const char *s, size_t *out)
{
    if (!*s)
        return -1;
    size_t v = 0;
    for (const char *p = s; *p; p++) {
        if (*p < '0' || *p > '9' || v > (SIZE_MAX - 9) / 10)
            return -1;
        v = v * 10 + (size_t)(*p - '0');
    }
    *out = v;
    return 0;
}

int parse_targets(const char *s, double *targets, size_t *n, size_t max)
{
    const char *p = s;
    for (;;) {
        const char *e = strchr(p, ',');
        size_t len = e ? (size_t)(e - p) : strlen(p);
        double v;
        if (*n >= max || etacal_num_parse(p, len, &v) != ETACAL_NUM_VALUE || !(v > 0 && v < 1))
            return -1;
        targets[(*n)++] = v;
        if (!e)
            return 0;
        p = e + 1;
    }
}

int parse_names(char *s, char **names, size_t *n, size_t max)
{
    char *p = s;
    for (;;) {
        char *e = strchr(p, ',');
        if (e)
            *e = '\0';
        if (!*p || *n >= max)
            return -1;
        names[(*n)++] = p;
        if (!e)
            return 0;
        p = e + 1;
    }
}

void progress_cb(void *ud, uint64_t done, uint64_t total)
{
    progress *p = ud;
    if (total < (8u << 20) || !isatty(2))
        return;
    int pct = (int)(100.0 * (double)done / (double)total);
    if (pct == p->last_pct)
        return;
    p->last_pct = pct;
    p->active = 1;
    fprintf(stderr, "\retacal: reading %s: %llu of %llu MB (%d%%)", p->name, (unsigned long long)(done >> 20), (unsigned long long)(total >> 20), pct);
    fflush(stderr);
}

void progress_end(progress *p)
{
    if (p->active)
        fputs("\r\033[K", stderr);
    p->active = 0;
}

int parse_duration(const char *s, double *out)
{
    size_t len = strlen(s);
    double mult = 1;
    if (len > 0) {
        switch (s[len - 1]) {
        case 's': mult = 1; len--; break;
        case 'm': mult = 60; len--; break;
        case 'h': mult = 3600; len--; break;
        case 'd': mult = 86400; len--; break;
        case 'w': mult = 7 * 86400; len--; break;
        default: break;
        }
    }
    double v;
    if (len == 0 || etacal_num_parse(s, len, &v) != ETACAL_NUM_VALUE || !isfinite(v) || v < 0)
        return -1;
    *out = v * mult;
    return 0;
}

int read_option(int c, const char *cmd, etacal_read_opts *ro)
{
    switch (c) {
    case OPT_DELIM:
        if (parse_delim(optarg, &ro->delim) != 0)
            return usage_error(cmd, "--delim must be comma, semicolon, tab or pipe");
        return 0;
    case OPT_BAD_ROWS:
        if (parse_bad_rows(optarg, &ro->bad_rows) != 0)
            return usage_error(cmd, "--bad-rows must be error or skip");
        return 0;
    case OPT_MAX_BAD:
        if (parse_share(optarg, &ro->max_bad_share) != 0)
            return usage_error(cmd, "--max-bad-share takes a share in [0,1]");
        return 0;
    case OPT_THREADS:
        if (strcmp(optarg, "auto") == 0)
            ro->threads = ETACAL_THREADS_AUTO;
        else if (strcmp(optarg, "1") == 0)
            ro->threads = 1;
        else
            return usage_error(cmd, "--threads must be 1 or auto");
        return 0;
    default:
        return -1;
    }
}

int other_option(int c, const char *cmd, etacal_read_opts *ro, char **argv)
{
    if (c == ':')
        return usage_error(cmd, "option '%s' needs a value", argv[optind - 1]);
    int r = read_option(c, cmd, ro);
    if (r < 0)
        return usage_error(cmd, "unknown option '%s'", argv[optind - 1]);
    return r;
}

int one_input(int argc, char **argv, const char *cmd, const char *what)
{
    if (optind >= argc)
        return usage_error(cmd, "no %s given", what);
    if (optind + 1 < argc)
        return usage_error(cmd, "one %s only ('%s' is extra)", what, argv[optind + 1]);
    return 0;
}

int parse_format(const char *s, const char *cmd, const char **out)
{
    if (strcmp(s, "text") && strcmp(s, "csv") && strcmp(s, "json"))
        return usage_error(cmd, "--format must be text, csv or json");
    *out = s;
    return 0;
}
