/* SPDX-License-Identifier: GPL-3.0-or-later */
/* version.c: the library's version at run time. */
#include "etacal/version.h"

const char *etacal_version(void) { return ETACAL_VERSION; }
