/* SPDX-License-Identifier: GPL-3.0-or-later */
/* version.h: the version of libetacal, at build time and at run time. */
#ifndef ETACAL_VERSION_H
#define ETACAL_VERSION_H

#ifdef __cplusplus
extern "C" {
#endif
#if defined(__GNUC__)
#pragma GCC visibility push(default)
#endif

/* The version this header belongs to ("MAJOR.MINOR.PATCH"). */
#define ETACAL_VERSION "0.1.0"

/* The version of the library the program runs with: compare it with
 * ETACAL_VERSION to notice a shared library other than the one built
 * against.  A static string. */
const char *etacal_version(void);

#if defined(__GNUC__)
#pragma GCC visibility pop
#endif
#ifdef __cplusplus
}
#endif
#endif
