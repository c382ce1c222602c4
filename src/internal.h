/* SPDX-License-Identifier: GPL-3.0-or-later */
/* internal.h: every private header of the library at once, by layer:
 * base.h (foundations), csvio.h (CSV engine), segment.h (segments),
 * quote_internal.h (quote tables).  A module includes the ones it uses
 * instead; tests and tools may include this one.  Not installed. */
#ifndef ETACAL_INTERNAL_H
#define ETACAL_INTERNAL_H

#include "base.h"
#include "csvio.h"
#include "quote_internal.h"
#include "segment.h"
#include "stream.h"
#include "results.h"

#endif
