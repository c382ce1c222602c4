/* SPDX-License-Identifier: GPL-3.0-or-later */
/* numparse.h: locale-free decimal numbers in and out.
 * Parsing and formatting never depend on the process locale: a CSV written
 * in Berlin and read in Paris gives the same doubles. */
#ifndef ETACAL_NUMPARSE_H
#define ETACAL_NUMPARSE_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

enum {
    ETACAL_NUM_VALUE = 0,   /* a number was stored in *out */
    ETACAL_NUM_MISSING = 1, /* empty, NA, NaN or null (any case): *out = NaN */
    ETACAL_NUM_BAD = -1     /* not a decimal number; *out untouched */
};

/* Parses the len bytes at s as a decimal number: optional sign, digits with
 * an optional '.', optional exponent (e/E), or inf/infinity.  Spaces around
 * the number are allowed.  Hexadecimal, thousands separators and a decimal
 * comma are rejected, and so is a number beyond the range of a double
 * (1e400) or a nonzero one that would round to zero (1e-400): neither
 * becomes inf or 0.  The result is correctly rounded.  Returns one of the
 * ETACAL_NUM_* codes above. */
int etacal_num_parse(const char *s, size_t len, double *out);

/* Writes the shortest decimal form of x that reads back as exactly x
 * (at most 17 significant digits), NUL-terminated, into buf (at least
 * ETACAL_NUM_BUFSZ bytes).  NaN is written as "nan", infinities as "inf" and
 * "-inf".  Returns the length written. */
#define ETACAL_NUM_BUFSZ 40
size_t etacal_num_format(double x, char *buf);

/* Writes tau * 100 from tau's shortest decimal form, without rounding
 * error (0.975 -> "97.5", 0.9 -> "90"), into buf (ETACAL_NUM_BUFSZ bytes). */
void etacal_percent_label(double tau, char *buf);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
