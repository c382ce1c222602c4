/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quote_internal.h: what the quote-table fitter, reader and fit run share (layer 4).
 * Not installed. */
#ifndef ETACAL_QUOTE_INTERNAL_H
#define ETACAL_QUOTE_INTERNAL_H

#include "base.h"

/* 1 when a key column may not have this name: a quote-table column
 * (target, method, n, k, offset_s, slope, ...) or a coef_ column (fit.c). */
int fit_key_name_reserved(const char *name);

/* Shared by the table fitter and reader. */
int quotes_set_targets(etacal_quotes *q, const double *targets, size_t n, etacal_error *err);
int segment_alloc(etacal_segment *s, size_t nkeys, size_t ntargets);

#endif
