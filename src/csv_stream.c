/* SPDX-License-Identifier: GPL-3.0-or-later */
/* csv_stream.c: libcsv over a file in chunks, with physical line numbers
 * for messages and, for commands that copy records through, each record's
 * exact bytes.
 *
 * libcsv is run in strict mode with CSV_REPALL_NL, so that every unquoted
 * line terminator reaches the row callback: a record that ends in CRLF is
 * reported at its CR and followed by an empty row at the LF, and a blank
 * line is an empty row.  Counting the LFs of empty rows and of record ends,
 * plus the LFs inside quoted fields, gives the physical line of each record. */
#include "base.h"
#include "csvio.h"

#include <csv.h>
#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>

#define CHUNK (1u << 20)

typedef struct {
    const csvstream_cb *cb;
    size_t col;        /* fields seen in the current record */
    size_t line;       /* physical line where the current record starts */
    size_t pending_nl; /* LFs inside quoted fields of the current record */
    const char *raw;   /* raw mode: the current record's bytes */
    size_t rawlen;
    size_t cr_ends;     /* unquoted CRs libcsv found in the current raw slice */
    int count_nl;       /* fields of this chunk may hold a line feed */
    int check_nul;      /* this chunk holds a NUL byte */
    size_t nul_line;    /* a field with a NUL byte: its line, else 0 */
    size_t nul_col;
    int stopped;
} ctx;

void format_where(char *buf, size_t size, const char *path, size_t line)
{
    if (line)
        snprintf(buf, size, "%s:%zu", path, line);
    else
        snprintf(buf, size, "%s", path);
}

static void on_field(void *s, size_t len, void *ud)
{
    ctx *c = ud;
    if (c->stopped)
        return;
    /* An LF inside a field can only come from a quoted field; fields are
     * short, so a plain loop beats a call to memchr. */
    if (c->count_nl) {
        const char *b = s;
        size_t nl = 0;
        for (size_t i = 0; i < len; i++)
            nl += b[i] == '\n';
        c->pending_nl += nl;
    }
    /* A NUL byte is no text: C strings would cut the field short, so
     * that two different keys could print alike.  Only chunks that hold
     * one pay for the check. */
    if (c->check_nul && memchr(s, '\0', len)) {
        c->nul_line = c->line;
        c->nul_col = c->col + 1;
        c->stopped = 1;
        return;
    }
    c->cb->field(c->cb->ud, c->col++, s, len);
}

static void on_row(int term, void *ud)
{
    ctx *c = ud;
    c->cr_ends += term == '\r';
    if (c->col == 0) { /* a blank line, or the LF after a CR */
        if (term == '\n')
            c->line++;
        return;
    }
    size_t nf = c->col;
    c->col = 0;
    if (!c->stopped) {
        if (c->cb->row(c->cb->ud, nf, c->line, c->raw, c->rawlen))
            c->stopped = 1;
    }
    c->line += c->pending_nl + (term == '\n');
    c->pending_nl = 0;
}

static int is_space(unsigned char ch) { return ch == ' '; }

static int quote_error(struct csv_parser *p, const char *path, size_t line, etacal_error *err)
{
    char where[128];
    format_where(where, sizeof where, path, line);
    if (csv_error(p) == CSV_ENOMEM)
        return etacal_error_set(err, ETACAL_ENOMEM, where, "out of memory");
    return etacal_error_set(err, ETACAL_EPARSE, where,
                            "malformed quoting: a quoted field must be quoted as a whole, with "
                            "inner quotes doubled");
}

static int bare_cr_error(const char *path, size_t line, etacal_error *err)
{
    char where[128];
    format_where(where, sizeof where, path, line);
    return etacal_error_set(err, ETACAL_EPARSE, where,
                            "a bare carriage return ends a line; use LF or CRLF line endings");
}

/* Feeds one whole record (raw mode) to libcsv.  A raw slice ends at its
 * first unquoted LF, so the only unquoted CR it may hold is the one right
 * before that LF: any other would end a record inside the slice (or make a
 * blank line of its own), and the raw bytes could not be cut at it. */
static int feed_record(struct csv_parser *p, ctx *c, const char *rec, size_t len, const char *path,
                       etacal_error *err)
{
    c->raw = rec;
    c->rawlen = len;
    c->cr_ends = 0;
    size_t startline = c->line;
    size_t used = csv_parse(p, rec, len, on_field, on_row, c);
    if (c->stopped)
        return ETACAL_OK; /* the caller sees c->stopped and keeps that error */
    if (used != len)
        return quote_error(p, path, startline, err);
    int crlf = len >= 2 && rec[len - 2] == '\r' && rec[len - 1] == '\n';
    if (c->cr_ends > (size_t)crlf)
        return bare_cr_error(path, startline, err);
    return ETACAL_OK;
}

int csvstream_run(const char *path, char delim, int raw, const csvstream_cb *cb, uint64_t *bytes_out,
                  etacal_error *err)
{
    return csvstream_run_range(path, delim, raw, cb, NULL, bytes_out, err);
}

int csvstream_run_range(const char *path, char delim, int raw, const csvstream_cb *cb, csvstream_range *range,
                        uint64_t *bytes_out, etacal_error *err)
{
    int rc = ETACAL_OK;
    FILE *fp = NULL;
    char *buf = NULL, *rec = NULL;
    size_t reclen = 0, reccap = 0;
    int in_quote = 0;
    struct csv_parser p;
    int parser_ok = 0;
    uint64_t total = 0, done = 0;
    ctx c = {.cb = cb, .line = range ? range->first_line : 1, .count_nl = 1};
    uint64_t left = range ? range->end - range->start : UINT64_MAX;

    /* the path as it is: standard input is the caller's "/dev/stdin" */
    fp = fopen(path, "rb");
    if (!fp) {
        rc = errno == ENOMEM ? etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory")
                             : etacal_error_set(err, ETACAL_EIO, path, "cannot open: %s", strerror(errno));
        goto done;
    }
    struct stat st;
    if (fstat(fileno(fp), &st) == 0) {
        if (S_ISDIR(st.st_mode)) {
            rc = etacal_error_set(err, ETACAL_EIO, path, "is a directory");
            goto done;
        }
        if (S_ISREG(st.st_mode))
            total = (uint64_t)st.st_size;
    }
    if (range) {
        if (fseeko(fp, (off_t)range->start, SEEK_SET) != 0) {
            rc = etacal_error_set(err, ETACAL_EIO, path, "cannot seek: %s", strerror(errno));
            goto done;
        }
        total = left;
    }
    buf = malloc(CHUNK);
    if (!buf) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
        goto done;
    }
    if (csv_init(&p, CSV_STRICT | CSV_REPALL_NL | CSV_STRICT_FINI) != 0) {
        rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
        goto done;
    }
    parser_ok = 1;
    csv_set_delim(&p, (unsigned char)(delim ? delim : ','));
    /* libcsv grows its field buffer by this many bytes at a time; its
     * default of 128 makes a field of megabytes cost a quadratic number of
     * copied bytes */
    csv_set_blk_size(&p, 1u << 16);
    /* libcsv trims spaces and tabs around unquoted fields; with a tab
     * delimiter only spaces may be trimmed. */
    if (delim == '\t')
        csv_set_space_func(&p, is_space);

    int first = !range || range->start == 0;
    for (;;) {
        size_t want = left < CHUNK ? (size_t)left : CHUNK;
        size_t got = want ? fread(buf, 1, want, fp) : 0;
        left -= got;
        if (got == 0) {
            if (ferror(fp)) {
                rc = etacal_error_set(err, ETACAL_EIO, path, "read failed: %s", strerror(errno));
                goto done;
            }
            break;
        }
        const char *data = buf;
        size_t len = got;
        done += got;
        if (first) {
            first = 0;
            if (len >= 3 && (unsigned char)data[0] == 0xEF && (unsigned char)data[1] == 0xBB &&
                (unsigned char)data[2] == 0xBF) {
                data += 3;
                len -= 3;
            }
        }
        c.check_nul = c.check_nul || memchr(data, '\0', len) != NULL;
        if (!raw) {
            /* A field can hold a line feed only if it is quoted: when the
             * chunk has no quote character and no quoted field is open
             * from the previous chunk (libcsv's public parser state), the
             * per-field count can be skipped. */
            c.count_nl = p.quoted || memchr(data, '"', len) != NULL;
            size_t startline = c.line;
            size_t used = csv_parse(&p, data, len, on_field, on_row, &c);
            if (c.stopped)
                break; /* the callback's error is the first one; keep it */
            if (used != len) {
                rc = quote_error(&p, path, c.line ? c.line : startline, err);
                goto done;
            }
        } else {
            /* Record ends are line feeds outside quotes.  memchr jumps from
             * one quote or line feed to the next; a doubled quote toggles
             * twice, so the parity stays right (RFC 4180). */
            size_t start = 0, i = 0, nlpos = 0;
            int have_nl = 0;
            while (i < len && !c.stopped) {
                if (in_quote) {
                    const char *q = memchr(data + i, '"', len - i);
                    if (!q)
                        break;
                    in_quote = 0;
                    i = (size_t)(q - data) + 1;
                    continue;
                }
                if (!have_nl || nlpos < i) {
                    const char *nl = memchr(data + i, '\n', len - i);
                    if (!nl) {
                        /* the tail: its quotes set the state for the next chunk */
                        for (const char *t = data + i;
                             (t = memchr(t, '"', (size_t)(data + len - t))) != NULL; t++)
                            in_quote = !in_quote;
                        break;
                    }
                    nlpos = (size_t)(nl - data);
                    have_nl = 1;
                }
                const char *q = memchr(data + i, '"', nlpos - i);
                if (q) {
                    in_quote = 1;
                    i = (size_t)(q - data) + 1;
                    continue;
                }
                i = nlpos;
                const char *r = data + start;
                size_t rl = i + 1 - start;
                if (reclen) {
                    if (grow_array((void **)&rec, &reccap, reclen + rl, 1) != 0) {
                        rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
                        goto done;
                    }
                    memcpy(rec + reclen, r, rl);
                    reclen += rl;
                    r = rec;
                    rl = reclen;
                }
                rc = feed_record(&p, &c, r, rl, path, err);
                reclen = 0;
                if (rc)
                    goto done;
                start = i + 1;
                i = start;
            }
            if (!c.stopped && start < len) {
                size_t rl = len - start;
                if (grow_array((void **)&rec, &reccap, reclen + rl, 1) != 0) {
                    rc = etacal_error_set(err, ETACAL_ENOMEM, path, "out of memory");
                    goto done;
                }
                memcpy(rec + reclen, data + start, rl);
                reclen += rl;
            }
        }
        if (c.stopped)
            break;
        if (cb->progress)
            cb->progress(cb->progress_ud, done, total);
    }
    if (!c.stopped && raw && reclen) {
        /* The last record has no line terminator; csv_fini ends it. */
        c.raw = rec;
        c.rawlen = reclen;
        c.cr_ends = 0;
        size_t startline = c.line;
        size_t used = csv_parse(&p, rec, reclen, on_field, on_row, &c);
        if (!c.stopped && used != reclen) {
            rc = quote_error(&p, path, startline, err);
            goto done;
        }
        /* no LF follows: any unquoted CR here is a bare one */
        if (!c.stopped && c.cr_ends) {
            rc = bare_cr_error(path, startline, err);
            goto done;
        }
    }
    if (!c.stopped && range && range->allow_open && p.quoted) {
        range->open_end = 1; /* the caller's split fell inside a quoted field */
        goto done;
    }
    if (!c.stopped) {
        size_t startline = c.line;
        if (csv_fini(&p, on_field, on_row, &c) != 0) {
            char where[128];
            format_where(where, sizeof where, path, startline);
            rc = etacal_error_set(err, ETACAL_EPARSE, where, "unterminated quoted field");
            goto done;
        }
    }
    if (c.stopped && c.nul_line) {
        char where[128];
        format_where(where, sizeof where, path, c.nul_line);
        rc = etacal_error_set(err, ETACAL_EPARSE, where, "field %zu holds a NUL byte (binary data is not CSV)",
                              c.nul_col);
    } else if (c.stopped)
        rc = err && err->code ? err->code : ETACAL_EPARSE;

done:
    if (range)
        range->end_line = c.line;
    if (bytes_out)
        *bytes_out = done;
    if (parser_ok)
        csv_free(&p);
    free(rec);
    free(buf);
    if (fp)
        fclose(fp);
    return rc;
}

void rowbuf_add(rowbuf *r, const char *s, size_t len)
{
    if (r->oom)
        return;
    if (r->len + len + 1 > r->cap || r->nf >= r->fcap) {
        size_t fc = r->fcap;
        if (grow_array((void **)&r->buf, &r->cap, r->len + len + 1, 1) != 0 ||
            grow_array((void **)&r->off, &fc, r->nf + 1, sizeof *r->off) != 0) {
            r->oom = 1;
            return;
        }
        fc = r->fcap; /* off and flen grow alike, from the same capacity */
        if (grow_array((void **)&r->flen, &fc, r->nf + 1, sizeof *r->flen) != 0) {
            r->oom = 1;
            return;
        }
        r->fcap = fc;
    }
    memcpy(r->buf + r->len, s, len);
    r->buf[r->len + len] = '\0';
    r->off[r->nf] = r->len;
    r->flen[r->nf] = len;
    r->nf++;
    r->len += len + 1;
}

void rowbuf_free(rowbuf *r)
{
    free(r->buf);
    free(r->off);
    free(r->flen);
    memset(r, 0, sizeof *r);
}

int csv_find_split(const char *path, uint64_t size, uint64_t *header_end, size_t *header_lines,
                   uint64_t *split)
{
    *header_end = 0;
    *header_lines = 0;
    *split = 0;
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return -1;
    unsigned char *buf = malloc(CHUNK);
    if (!buf) {
        fclose(fp);
        return -1;
    }
    int rc = 0, parity = 0;
    size_t lines = 0;
    /* the header: the first line feed outside quotes in the first chunk */
    size_t got = fread(buf, 1, CHUNK, fp);
    for (size_t i = 0; i < got; i++) {
        if (buf[i] == '"')
            parity ^= 1;
        else if (buf[i] == '\n') {
            lines++;
            if (!parity) {
                *header_end = i + 1;
                *header_lines = lines;
                break;
            }
        }
    }
    /* the candidate split: the first line feed at or after the middle */
    uint64_t pos = size / 2;
    if (*header_end && pos > *header_end && fseeko(fp, (off_t)pos, SEEK_SET) == 0) {
        while ((got = fread(buf, 1, 1u << 16, fp)) > 0) {
            const unsigned char *nl = memchr(buf, '\n', got);
            if (nl) {
                *split = pos + (uint64_t)(nl - buf) + 1;
                break;
            }
            pos += got;
        }
    }
    if (ferror(fp))
        rc = -1;
    free(buf);
    fclose(fp);
    return rc;
}
