/* SPDX-License-Identifier: GPL-3.0-or-later */
/* writers.c: the public writers over a sink or a path.  Each wraps the
 * module's stdio writer: a sink through a stream of its own (io.c), a path
 * through an output file that appears whole or not at all.  A path is taken
 * as it is ("-" names a file called "-"; standard output is the caller's
 * business). */
#include "base.h"
#include "stream.h"

#include <string.h>

int etacal_quotes_write(const etacal_quotes *q, const etacal_sink *out, etacal_error *err)
{
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    return sink_fclose(fp, quotes_write_csv(q, fp, err), err);
}

int etacal_quotes_write_path(const etacal_quotes *q, const char *path, etacal_error *err)
{
    outfile of;
    int rc = outfile_open(&of, path, err);
    if (rc)
        return rc;
    if ((rc = quotes_write_csv(q, of.fp, err)) != 0) {
        outfile_abort(&of);
        return rc;
    }
    return outfile_commit(&of, err);
}

int etacal_apply(const etacal_quotes *q, const char *in_path, const etacal_sink *out,
                 const etacal_apply_opts *opts, etacal_apply_stats *stats, etacal_error *err)
{
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    return sink_fclose(fp, apply_csv(q, in_path, fp, opts, stats, err), err);
}

int etacal_apply_path(const etacal_quotes *q, const char *in_path, const char *out_path,
                      const etacal_apply_opts *opts, etacal_apply_stats *stats, etacal_error *err)
{
    outfile of;
    int rc = outfile_open(&of, out_path, err);
    if (rc)
        return rc;
    if ((rc = apply_csv(q, in_path, of.fp, opts, stats, err)) != 0) {
        outfile_abort(&of);
        return rc;
    }
    return outfile_commit(&of, err);
}

int etacal_qr_predict(const double *coef, const double *taus, size_t ntau, size_t k, const char *const *xnames,
                      const char *in_path, const etacal_sink *out, const etacal_qr_predict_opts *opts,
                      etacal_qr_predict_stats *stats, etacal_error *err)
{
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    return sink_fclose(fp, qr_predict_csv(coef, taus, ntau, k, xnames, in_path, fp, opts, stats, err), err);
}

int etacal_qr_fits_predict(const etacal_qr_fits *f, const char *const *xnames, const char *in_path,
                           const etacal_sink *out, char delim, int bad_rows, etacal_qr_predict_stats *stats,
                           etacal_error *err)
{
    FILE *fp;
    int orc = sink_fopen(out, &fp, err);
    if (orc)
        return orc;
    return sink_fclose(fp, qr_fits_predict_csv(f, xnames, in_path, fp, delim, bad_rows, stats, err), err);
}
