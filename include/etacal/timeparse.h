/* SPDX-License-Identifier: GPL-3.0-or-later */
/* timeparse.h: timestamps as seconds since the Unix epoch. */
#ifndef ETACAL_TIMEPARSE_H
#define ETACAL_TIMEPARSE_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif
/* Declarations here are the library's API: exported from libetacal.so,
 * whose objects are built with -fvisibility=hidden (see the Makefile). */
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

/* Parses the len bytes at s as Unix seconds (a decimal number) or an ISO
 * 8601 date-time: YYYY-MM-DD, optionally followed by 'T' or a space and
 * hh:mm, hh:mm:ss or hh:mm:ss.fff, and by 'Z' or an offset +hh:mm, +hhmm or
 * +hh (also '-').  Without a zone the time is taken as UTC.  Fields are
 * checked (month 1-12, the day within its month, leap years, hour 0-23,
 * minute 0-59, second 0-60); Unix seconds must fall in the same years
 * 0000-9999 (-62167219200 <= t < 253402300800).  Returns ETACAL_NUM_VALUE with the seconds in
 * *out, ETACAL_NUM_MISSING for an empty/NA cell, or ETACAL_NUM_BAD. */
int etacal_time_parse(const char *s, size_t len, double *out);

/* Writes t (seconds since the epoch, whole seconds shown) as
 * YYYY-MM-DDThh:mm:ssZ into buf (at least 32 bytes). */
void etacal_time_format(double t, char *buf);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
