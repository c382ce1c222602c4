/* SPDX-License-Identifier: GPL-3.0-or-later */
/* etacal.h: the whole public API of libetacal.
 *
 * No call is needed before using it: the library turns GSL's aborting
 * error handler off when it is loaded and reports every GSL failure as an
 * etacal_error record (a program that wants a GSL handler of its own for its own
 * GSL calls sets it afterwards).  It starts no threads unless a call's
 * options ask for them, and keeps no state between calls. */
#ifndef ETACAL_H
#define ETACAL_H

#include "etacal/version.h"
#include "etacal/error.h"
#include "etacal/numparse.h"
#include "etacal/timeparse.h"
#include "etacal/io.h"
#include "etacal/conformal.h"
#include "etacal/table.h"
#include "etacal/quote.h"
#include "etacal/quote_index.h"
#include "etacal/fit.h"
#include "etacal/publish.h"
#include "etacal/apply.h"
#include "etacal/binom.h"
#include "etacal/metrics.h"
#include "etacal/check.h"
#include "etacal/quantreg.h"
#include "etacal/backtest.h"
#include "etacal/curve.h"
#include "etacal/report.h"

#endif
