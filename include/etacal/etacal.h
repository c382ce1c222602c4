/* SPDX-License-Identifier: GPL-3.0-or-later */
/* etacal.h: the whole public API of libetacal.
 *
 * Embedders must call gsl_set_error_handler_off() once before using the
 * library: GSL's default handler aborts the process. */
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
#include "etacal/svg.h"
#include "etacal/report.h"

#endif
