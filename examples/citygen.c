/* SPDX-License-Identifier: GPL-3.0-or-later */
/*
 * citygen.c - seeded demo data generator for etacal.
 *
 * Simulates the courier network of Veldmark, an invented river city, and
 * writes delivery records with a point model's predicted duration (pred_s)
 * next to the actual duration (actual_s).  The point model is close to a
 * conditional-mean regressor but is biased in a few zone x band segments,
 * so its bare on-time rate (actual <= pred) is a little above one half
 * overall and differs between segments: a realistic input for etacal.
 *
 * Default mode writes a calibration file (28 days from 2026-10-05) and a
 * fresh file (the following 7 days) drawn from the same process.  --bench
 * writes a large 4-column file (zone,band,pred_s,actual_s) for benchmarks.
 *
 * Output is a pure function of --seed and the row counts: the generator uses
 * its own PRNG (xoshiro256** seeded by splitmix64), its own normal draws
 * (Marsaglia polar method) and its own calendar code, never libc rand() or
 * the local time zone.
 *
 * Build:  cc -std=c11 -O2 examples/citygen.c -o build/citygen -lm
 *
 * Copyright (C) 2026 The etacal authors.
 * This program is free software: you can redistribute it and/or modify it
 * under the terms of the GNU General Public License as published by the Free
 * Software Foundation, either version 3 of the License, or (at your option)
 * any later version.  It is distributed WITHOUT ANY WARRANTY; see the GNU
 * General Public License for more details.
 */

#define _POSIX_C_SOURCE 200809L

#include <sys/stat.h>

#include <errno.h>
#include <getopt.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define PROG "etacal-citygen"

#define DEFAULT_SEED 20261005ULL
#define DEFAULT_ROWS 60000ULL
#define DEFAULT_FRESH_ROWS 20000ULL
#define MAX_ROWS 1000000000ULL
#define DEFAULT_CAL "veldmark-cal.csv"
#define DEFAULT_FRESH "veldmark-fresh.csv"
#define DEFAULT_BENCH "veldmark-bench.csv"

#define CAL_DAYS 28
#define FRESH_DAYS 7
#define MAX_HOURS (24 * (CAL_DAYS + FRESH_DAYS))

#define ACTUAL_MIN_S 300.0
#define ACTUAL_MAX_S 10800.0

/* ------------------------------------------------------------------------ */
/* PRNG: splitmix64 for seeding, xoshiro256** for the streams.              */

typedef struct {
    uint64_t s[4];
    int has_spare;
    double spare;
} rng_t;

static uint64_t splitmix64(uint64_t *state)
{
    uint64_t z = (*state += 0x9e3779b97f4a7c15ULL);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    return z ^ (z >> 31);
}

static void rng_seed(rng_t *r, uint64_t *sm)
{
    for (int i = 0; i < 4; i++)
        r->s[i] = splitmix64(sm);
    r->has_spare = 0;
    r->spare = 0.0;
}

static inline uint64_t rotl64(uint64_t x, int k)
{
    return (x << k) | (x >> (64 - k));
}

static inline uint64_t rng_next(rng_t *r)
{
    uint64_t *s = r->s;
    const uint64_t result = rotl64(s[1] * 5, 7) * 9;
    const uint64_t t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl64(s[3], 45);
    return result;
}

/* Uniform in [0, 1). */
static inline double rng_unif(rng_t *r)
{
    return (double)(rng_next(r) >> 11) * 0x1.0p-53;
}

/* Exponential with mean 1. */
static inline double rng_exp(rng_t *r)
{
    return -log(1.0 - rng_unif(r));
}

/* Standard normal, Marsaglia polar method (keeps the second value). */
static double rng_normal(rng_t *r)
{
    double u, v, q, m;
    if (r->has_spare) {
        r->has_spare = 0;
        return r->spare;
    }
    do {
        u = 2.0 * rng_unif(r) - 1.0;
        v = 2.0 * rng_unif(r) - 1.0;
        q = u * u + v * v;
    } while (q >= 1.0 || q == 0.0);
    m = sqrt(-2.0 * log(q) / q);
    r->spare = v * m;
    r->has_spare = 1;
    return u * m;
}

/* Index drawn from non-negative weights w[0..n-1] with total tot. */
static int rng_pick(rng_t *r, const double *w, int n, double tot)
{
    double x = rng_unif(r) * tot;
    for (int i = 0; i < n - 1; i++) {
        if (x < w[i])
            return i;
        x -= w[i];
    }
    return n - 1;
}

/* ------------------------------------------------------------------------ */
/* Veldmark.                                                                */

enum { N_ZONES = 8, N_BANDS = 5, N_VEH = 3 };
enum { Z_HARBOUR, Z_OLDTOWN, Z_RIVERSIDE, Z_NORTHHILL, Z_MARKET,
       Z_UNIVERSITY, Z_DOCKLANDS, Z_EASTMEADOW };
enum { B_BREAKFAST, B_LUNCH, B_AFTERNOON, B_DINNER, B_LATE };
enum { V_BIKE, V_SCOOTER, V_CAR };

static const char *const zone_name[N_ZONES] = {
    "harbour", "old-town", "riverside", "north-hill",
    "market", "university", "docklands", "east-meadow"
};
static const char *const band_name[N_BANDS] = {
    "breakfast", "lunch", "afternoon", "dinner", "late"
};
static const char *const veh_name[N_VEH] = { "bike", "scooter", "car" };

/* Order intensity by hour of day (relative), and by day of week (Mon..Sun). */
static const double hour_w[24] = {
    0.35, 0.20, 0.12, 0.08, 0.06, 0.08, 0.25, 0.45, 0.60, 0.60, 0.75, 1.40,
    2.00, 1.50, 0.80, 0.65, 0.75, 1.30, 2.30, 2.50, 1.70, 1.00, 0.70, 0.50
};
static const double dow_w[7] = { 0.92, 0.90, 0.95, 1.00, 1.15, 1.20, 1.05 };

/* Zone mix per band. */
static const double zone_w[N_BANDS][N_ZONES] = {
    /* harb  old   river north market univ  dock  east */
    { 0.9,  1.2,  1.1,  1.0,  0.9,  0.8,  1.2,  0.9 }, /* breakfast */
    { 1.0,  1.4,  1.0,  0.7,  1.3,  1.5,  1.4,  0.6 }, /* lunch */
    { 1.0,  1.1,  1.0,  0.8,  1.1,  1.2,  0.9,  0.8 }, /* afternoon */
    { 1.1,  1.3,  1.2,  1.2,  1.0,  0.9,  1.0,  1.3 }, /* dinner */
    { 1.0,  1.2,  1.0,  0.8,  0.9,  1.6,  0.7,  0.8 }, /* late */
};

/* Median delivery distance (km): the outer zones lie across the river. */
static const double zone_dist_med[N_ZONES] = {
    3.0, 1.6, 2.3, 4.2, 1.9, 2.8, 5.2, 4.8
};
/* Speed multiplier (narrow lanes in old-town, climbs on north-hill). */
static const double zone_speed[N_ZONES] = {
    0.95, 0.80, 1.00, 0.88, 0.92, 1.00, 1.05, 1.05
};
/* Spread multiplier of the congestion factor (bridges, quays, ferries). */
static const double zone_cong_sd[N_ZONES] = {
    1.30, 1.10, 1.15, 1.00, 1.00, 1.00, 1.45, 0.90
};
/* Extra handover seconds (stairs, campus gates, warehouse desks). */
static const double zone_handover[N_ZONES] = {
    20.0, 45.0, 15.0, 10.0, 30.0, 60.0, 40.0, 5.0
};
/* Chance of a long hold-up (lifting bridge over the river, ferry queue). */
static const double zone_delay_p[N_ZONES] = {
    0.06, 0.02, 0.04, 0.02, 0.02, 0.02, 0.07, 0.03
};
#define DELAY_MEAN_S 540.0

/* Vehicle mix per zone (bike, scooter, car). */
static const double veh_w[N_ZONES][N_VEH] = {
    { 0.35, 0.40, 0.25 }, { 0.60, 0.30, 0.10 }, { 0.45, 0.40, 0.15 },
    { 0.15, 0.40, 0.45 }, { 0.55, 0.35, 0.10 }, { 0.50, 0.35, 0.15 },
    { 0.20, 0.35, 0.45 }, { 0.15, 0.35, 0.50 },
};
#define BIKE_MAX_EASY_KM 4.0
static const double veh_kmh[N_VEH] = { 14.0, 22.0, 26.0 };
static const double veh_handover[N_VEH] = { 0.0, 15.0, 90.0 };

/* Kitchen prep: lognormal, median by band. */
static const double prep_med[N_BANDS] = { 420.0, 600.0, 540.0, 780.0, 660.0 };
#define PREP_SD 0.45

/* Congestion: log-factor mean and spread by band. */
static const double cong_mu[N_BANDS] = { 0.00, 0.10, 0.05, 0.18, -0.08 };
static const double cong_sd[N_BANDS] = { 0.22, 0.28, 0.25, 0.42, 0.20 };

/* Handover: fixed part plus exponential wait at the door. */
#define HANDOVER_BASE_S 45.0
#define HANDOVER_WAIT_S 75.0

/* The point model's multiplicative bias in some segments (1 = unbiased). */
static double model_bias(int z, int b)
{
    if (z == Z_DOCKLANDS && b == B_DINNER)
        return 0.85;
    if (z == Z_UNIVERSITY && b == B_LUNCH)
        return 1.08;
    if (z == Z_HARBOUR && b == B_LATE)
        return 0.92;
    if (z == Z_EASTMEADOW && b == B_BREAKFAST)
        return 1.06;
    return 1.0;
}
#define MODEL_NOISE_SD 0.07

static int hour_band(int hour)
{
    if (hour >= 6 && hour < 10)
        return B_BREAKFAST;
    if (hour >= 10 && hour < 14)
        return B_LUNCH;
    if (hour >= 14 && hour < 17)
        return B_AFTERNOON;
    if (hour >= 17 && hour < 21)
        return B_DINNER;
    return B_LATE;
}

typedef struct {
    int zone, band, veh;
    double dist_km; /* rounded to 0.1 */
    long prep_s;
    double pred_s, actual_s;
} order_t;

static double zone_w_tot[N_BANDS];

static void init_tables(void)
{
    for (int b = 0; b < N_BANDS; b++) {
        zone_w_tot[b] = 0.0;
        for (int z = 0; z < N_ZONES; z++)
            zone_w_tot[b] += zone_w[b][z];
    }
}

static double clampd(double x, double lo, double hi)
{
    return x < lo ? lo : (x > hi ? hi : x);
}

/* Draw one order placed in the given hour of day. */
static void gen_order(rng_t *r, int hour, order_t *o)
{
    int b = hour_band(hour);
    int z = rng_pick(r, zone_w[b], N_ZONES, zone_w_tot[b]);
    double d = zone_dist_med[z] * exp(0.45 * rng_normal(r));
    int v;
    double speed, csd, cong, travel, hand, delay, actual, expect;
    double prep;

    d = clampd(d, 0.3, 14.0);
    d = floor(d * 10.0 + 0.5) / 10.0;
    {
        /* Long trips rarely go by bike. */
        double vw[N_VEH];
        memcpy(vw, veh_w[z], sizeof vw);
        if (d > BIKE_MAX_EASY_KM)
            vw[V_BIKE] *= exp(-(d - BIKE_MAX_EASY_KM) / 1.5);
        v = rng_pick(r, vw, N_VEH, vw[0] + vw[1] + vw[2]);
    }
    speed = veh_kmh[v] * zone_speed[z];

    prep = floor(prep_med[b] * exp(PREP_SD * rng_normal(r)) + 0.5);
    prep = clampd(prep, 60.0, 3600.0);

    csd = cong_sd[b] * zone_cong_sd[z];
    cong = exp(cong_mu[b] + csd * rng_normal(r));
    travel = d / speed * 3600.0 * cong;
    hand = HANDOVER_BASE_S + HANDOVER_WAIT_S * rng_exp(r) + veh_handover[v] +
           zone_handover[z];
    delay = 0.0;
    if (rng_unif(r) < zone_delay_p[z])
        delay = DELAY_MEAN_S * rng_exp(r);
    actual = clampd(prep + travel + hand + delay, ACTUAL_MIN_S, ACTUAL_MAX_S);

    /* Conditional mean given zone, band, vehicle and distance. */
    expect = prep_med[b] * exp(0.5 * PREP_SD * PREP_SD) +
             d / speed * 3600.0 * exp(cong_mu[b] + 0.5 * csd * csd) +
             HANDOVER_BASE_S + HANDOVER_WAIT_S + veh_handover[v] +
             zone_handover[z] + zone_delay_p[z] * DELAY_MEAN_S;
    expect *= model_bias(z, b) *
              exp(MODEL_NOISE_SD * rng_normal(r) -
                  0.5 * MODEL_NOISE_SD * MODEL_NOISE_SD);

    o->zone = z;
    o->band = b;
    o->veh = v;
    o->dist_km = d;
    o->prep_s = (long)prep;
    o->pred_s = clampd(expect, 60.0, ACTUAL_MAX_S);
    o->actual_s = actual;
}

/* ------------------------------------------------------------------------ */
/* Calendar (proleptic Gregorian, UTC), independent of the local time zone. */

static int64_t days_from_civil(int64_t y, int m, int d)
{
    int64_t era, yoe, doy, doe;
    y -= m <= 2;
    era = (y >= 0 ? y : y - 399) / 400;
    yoe = y - era * 400;
    doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
    doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    return era * 146097 + doe - 719468;
}

static void civil_from_days(int64_t z, int *y, int *m, int *d)
{
    int64_t era, doe, yoe, doy, mp;
    z += 719468;
    era = (z >= 0 ? z : z - 146096) / 146097;
    doe = z - era * 146097;
    yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
    doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    mp = (5 * doy + 2) / 153;
    *d = (int)(doy - (153 * mp + 2) / 5 + 1);
    *m = (int)(mp < 10 ? mp + 3 : mp - 9);
    *y = (int)(yoe + era * 400 + (*m <= 2));
}

/* Day of week, 0 = Monday. */
static int weekday(int64_t days)
{
    int64_t w = (days + 3) % 7; /* 1970-01-01 was a Thursday */
    return (int)(w < 0 ? w + 7 : w);
}

/* Cumulative order intensity per hour of a period. */
typedef struct {
    int64_t start;     /* epoch seconds of the first hour */
    int hours;
    double cum[MAX_HOURS + 1];
} period_t;

static void period_init(period_t *p, int64_t start_day, int days)
{
    p->start = start_day * 86400;
    p->hours = days * 24;
    p->cum[0] = 0.0;
    for (int h = 0; h < p->hours; h++) {
        int dow = weekday(start_day + h / 24);
        p->cum[h + 1] = p->cum[h] + hour_w[h % 24] * dow_w[dow];
    }
}

/* Map x in [0, cum[hours]) to epoch seconds; *hint speeds up sorted input. */
static int64_t period_time(const period_t *p, double x, int *hint)
{
    int h = *hint;
    double w, off;
    if (h < 0 || h >= p->hours || x < p->cum[h]) {
        int lo = 0, hi = p->hours - 1;
        while (lo < hi) {
            int mid = (lo + hi + 1) / 2;
            if (p->cum[mid] <= x)
                lo = mid;
            else
                hi = mid - 1;
        }
        h = lo;
    }
    while (h < p->hours - 1 && x >= p->cum[h + 1])
        h++;
    *hint = h;
    w = p->cum[h + 1] - p->cum[h];
    off = floor((x - p->cum[h]) / w * 3600.0);
    off = clampd(off, 0.0, 3599.0);
    return p->start + (int64_t)h * 3600 + (int64_t)off;
}

/* ------------------------------------------------------------------------ */
/* Buffered output with a hand-written number formatter.                    */

#define OUTBUF_SIZE (1u << 20)

typedef struct {
    FILE *fp;
    const char *path;
    char *buf;
    size_t len;
    int err;   /* errno of the first failure, or 0 */
    int regular; /* output is a regular file, safe to remove on error */
} out_t;

static void out_flush(out_t *o)
{
    if (o->len > 0 && !o->err) {
        if (fwrite(o->buf, 1, o->len, o->fp) != o->len)
            o->err = errno ? errno : EIO;
    }
    o->len = 0;
}

static inline void out_reserve(out_t *o, size_t n)
{
    if (o->len + n > OUTBUF_SIZE)
        out_flush(o);
}

static inline void out_str(out_t *o, const char *s)
{
    size_t n = strlen(s);
    out_reserve(o, n);
    memcpy(o->buf + o->len, s, n);
    o->len += n;
}

static inline void out_char(out_t *o, char c)
{
    out_reserve(o, 1);
    o->buf[o->len++] = c;
}

/* Unsigned integer, zero-padded to at least width digits. */
static inline void out_uint(out_t *o, uint64_t v, int width)
{
    char tmp[24];
    int n = 0;
    do {
        tmp[n++] = (char)('0' + v % 10);
        v /= 10;
    } while (v > 0);
    while (n < width && n < (int)sizeof tmp)
        tmp[n++] = '0';
    out_reserve(o, (size_t)n);
    while (n > 0)
        o->buf[o->len++] = tmp[--n];
}

/* Non-negative value with exactly one decimal, rounded half up. */
static inline void out_fix1(out_t *o, double x)
{
    uint64_t t = (uint64_t)(x * 10.0 + 0.5);
    out_uint(o, t / 10, 1);
    out_char(o, '.');
    out_char(o, (char)('0' + t % 10));
}

static void out_time(out_t *o, int64_t t)
{
    int64_t days = t / 86400;
    int secs = (int)(t - days * 86400);
    int y, m, d;
    civil_from_days(days, &y, &m, &d);
    out_uint(o, (uint64_t)y, 4);
    out_char(o, '-');
    out_uint(o, (uint64_t)m, 2);
    out_char(o, '-');
    out_uint(o, (uint64_t)d, 2);
    out_char(o, 'T');
    out_uint(o, (uint64_t)(secs / 3600), 2);
    out_char(o, ':');
    out_uint(o, (uint64_t)(secs / 60 % 60), 2);
    out_char(o, ':');
    out_uint(o, (uint64_t)(secs % 60), 2);
    out_char(o, 'Z');
}

/* Open path for writing ("-" is stdout).  Returns 0 or -1 with a message. */
static int out_open(out_t *o, const char *path)
{
    o->path = path;
    o->len = 0;
    o->err = 0;
    o->regular = 0;
    o->buf = malloc(OUTBUF_SIZE);
    if (!o->buf) {
        fprintf(stderr, PROG ": out of memory\n");
        return -1;
    }
    if (strcmp(path, "-") == 0) {
        o->fp = stdout;
    } else {
        o->fp = fopen(path, "wb");
        if (!o->fp) {
            fprintf(stderr, PROG ": cannot open %s: %s\n", path,
                    strerror(errno));
            free(o->buf);
            o->buf = NULL;
            return -1;
        }
        /* Never remove devices or pipes (think /dev/full) on error. */
        {
            struct stat st;
            o->regular = stat(path, &st) == 0 && S_ISREG(st.st_mode);
        }
    }
    return 0;
}

/* Remove a partially written output, if it is a regular file. */
static void out_discard(const out_t *o)
{
    if (o->regular && remove(o->path) == 0)
        fprintf(stderr, PROG ": removed %s\n", o->path);
}

/* Flush and close.  Returns 0 or -1 with a message. */
static int out_close(out_t *o)
{
    int rc = 0;
    out_flush(o);
    if (o->fp == stdout) {
        if (fflush(stdout) != 0 && !o->err)
            o->err = errno ? errno : EIO;
    } else if (o->fp) {
        if (fclose(o->fp) != 0 && !o->err)
            o->err = errno ? errno : EIO;
    }
    o->fp = NULL;
    if (o->err) {
        fprintf(stderr, PROG ": error writing %s: %s\n",
                strcmp(o->path, "-") == 0 ? "standard output" : o->path,
                strerror(o->err));
        rc = -1;
    }
    free(o->buf);
    o->buf = NULL;
    return rc;
}

/* ------------------------------------------------------------------------ */
/* Writers.                                                                 */

static const char full_header[] =
    "order_id,placed_at,zone,band,vehicle,distance_km,prep_s,pred_s,actual_s\n";
static const char bench_header[] = "zone,band,pred_s,actual_s\n";

/*
 * Write rows orders placed during period p, ids starting at first_id.
 * Placing times are the order statistics of rows uniforms mapped through
 * the inverse cumulative intensity; they are generated as normalised sums
 * of exponential spacings, in two passes over a cloned stream so nothing
 * has to be stored.
 */
static void write_period(out_t *o, const period_t *p, uint64_t rows,
                         uint64_t first_id, rng_t *arrivals, rng_t *attrs)
{
    rng_t pass1 = *arrivals;
    double total = 0.0, acc = 0.0, scale;
    int64_t prev = INT64_MIN, end = p->start + (int64_t)p->hours * 3600;
    int hint = 0;
    order_t od;
    /* More orders than seconds: times may repeat (several orders in one
     * second) instead of being pushed past each other to the period's end. */
    int strict = rows < (uint64_t)(end - p->start);

    for (uint64_t i = 0; i <= rows; i++)
        total += rng_exp(&pass1);
    scale = p->cum[p->hours] / total;

    out_str(o, full_header);
    for (uint64_t i = 0; i < rows && !o->err; i++) {
        int64_t t;
        int hour;
        acc += rng_exp(arrivals);
        t = period_time(p, acc * scale, &hint);
        /* Keep times strictly increasing while the period has room. */
        if (strict && t <= prev)
            t = prev + 1 < end ? prev + 1 : prev;
        else if (t < prev)
            t = prev;
        prev = t;
        hour = (int)((t / 3600) % 24);
        gen_order(attrs, hour, &od);

        out_str(o, "VM-");
        out_uint(o, first_id + i, 7);
        out_char(o, ',');
        out_time(o, t);
        out_char(o, ',');
        out_str(o, zone_name[od.zone]);
        out_char(o, ',');
        out_str(o, band_name[od.band]);
        out_char(o, ',');
        out_str(o, veh_name[od.veh]);
        out_char(o, ',');
        out_fix1(o, od.dist_km);
        out_char(o, ',');
        out_uint(o, (uint64_t)od.prep_s, 1);
        out_char(o, ',');
        out_fix1(o, od.pred_s);
        out_char(o, ',');
        out_fix1(o, od.actual_s);
        out_char(o, '\n');
    }
}

/* Independent draws from the calibration period's process, 4 columns. */
static void write_bench(out_t *o, const period_t *p, uint64_t rows, rng_t *r)
{
    double tot = p->cum[p->hours];
    int hint = -1;
    order_t od;

    out_str(o, bench_header);
    for (uint64_t i = 0; i < rows && !o->err; i++) {
        int64_t t = period_time(p, rng_unif(r) * tot, &hint);
        gen_order(r, (int)((t / 3600) % 24), &od);
        out_str(o, zone_name[od.zone]);
        out_char(o, ',');
        out_str(o, band_name[od.band]);
        out_char(o, ',');
        out_fix1(o, od.pred_s);
        out_char(o, ',');
        out_fix1(o, od.actual_s);
        out_char(o, '\n');
    }
}

/* ------------------------------------------------------------------------ */
/* Command line.                                                            */

static void usage(FILE *fp)
{
    fprintf(fp,
        "Usage: citygen [OPTION]...\n"
        "Write seeded demo delivery data for etacal: orders of the couriers of\n"
        "Veldmark, an invented river city, with a point model's predicted\n"
        "duration (pred_s) and the actual duration (actual_s).\n"
        "\n"
        "Default mode writes two CSV files with the columns\n"
        "  order_id,placed_at,zone,band,vehicle,distance_km,prep_s,pred_s,actual_s\n"
        "a calibration file covering 28 days from 2026-10-05T00:00:00Z and a\n"
        "fresh file covering the following 7 days, drawn from the same process.\n"
        "\n"
        "Options:\n"
        "  -s, --seed N         PRNG seed (default %llu)\n"
        "  -n, --rows N         calibration rows, or bench rows (default %llu)\n"
        "  -f, --fresh-rows N   fresh rows (default %llu)\n"
        "  -c, --cal FILE       calibration output (default %s;\n"
        "                       with --bench default %s, '-' = stdout)\n"
        "  -F, --fresh FILE     fresh output (default %s)\n"
        "  -b, --bench          write only zone,band,pred_s,actual_s to the\n"
        "                       --cal file: independent draws for benchmarks\n"
        "  -h, --help           show this help and exit\n"
        "\n"
        "Output depends only on the seed and the row counts.  Exit status: 0 on\n"
        "success, 1 on an I/O error, 2 on a usage error.\n",
        (unsigned long long)DEFAULT_SEED, (unsigned long long)DEFAULT_ROWS,
        (unsigned long long)DEFAULT_FRESH_ROWS, DEFAULT_CAL, DEFAULT_BENCH,
        DEFAULT_FRESH);
}

static void usage_error(const char *msg, const char *arg)
{
    if (arg)
        fprintf(stderr, PROG ": %s: %s\n", msg, arg);
    else
        fprintf(stderr, PROG ": %s\n", msg);
    fprintf(stderr, "Try 'citygen --help' for more information.\n");
    exit(2);
}

/* Parse a decimal unsigned integer (digits only) no larger than max. */
static uint64_t parse_u64(const char *opt, const char *s, uint64_t max)
{
    uint64_t v = 0;
    char msg[64];
    snprintf(msg, sizeof msg, "invalid value for %s", opt);
    if (*s == '\0')
        usage_error(msg, "(empty)");
    for (const char *c = s; *c; c++) {
        unsigned dgt;
        if (*c < '0' || *c > '9')
            usage_error(msg, s);
        dgt = (unsigned)(*c - '0');
        if (v > (max - dgt) / 10)
            usage_error(msg, s);
        v = v * 10 + dgt;
    }
    return v;
}

int main(int argc, char **argv)
{
    static const struct option longopts[] = {
        { "seed", required_argument, NULL, 's' },
        { "rows", required_argument, NULL, 'n' },
        { "fresh-rows", required_argument, NULL, 'f' },
        { "cal", required_argument, NULL, 'c' },
        { "fresh", required_argument, NULL, 'F' },
        { "bench", no_argument, NULL, 'b' },
        { "help", no_argument, NULL, 'h' },
        { NULL, 0, NULL, 0 }
    };
    uint64_t seed = DEFAULT_SEED, rows = DEFAULT_ROWS;
    uint64_t fresh_rows = DEFAULT_FRESH_ROWS;
    const char *cal = NULL, *fresh = NULL;
    int bench = 0, fresh_given = 0, ch;
    uint64_t sm;
    rng_t cal_arr, cal_attr, fresh_arr, fresh_attr, bench_rng;
    static period_t pcal, pfresh;
    int64_t day0 = days_from_civil(2026, 10, 5);
    out_t o, ocal;

    opterr = 0;
    while ((ch = getopt_long(argc, argv, ":s:n:f:c:F:bh", longopts,
                             NULL)) != -1) {
        switch (ch) {
        case 's':
            seed = parse_u64("--seed", optarg, UINT64_MAX);
            break;
        case 'n':
            rows = parse_u64("--rows", optarg, MAX_ROWS);
            break;
        case 'f':
            fresh_rows = parse_u64("--fresh-rows", optarg, MAX_ROWS);
            fresh_given = 1;
            break;
        case 'c':
            cal = optarg;
            break;
        case 'F':
            fresh = optarg;
            fresh_given = 1;
            break;
        case 'b':
            bench = 1;
            break;
        case 'h':
            usage(stdout);
            if (fflush(stdout) != 0 || ferror(stdout))
                return 1;
            return 0;
        case ':':
        case '?': {
            char shortopt[3] = { '-', (char)optopt, '\0' };
            const char *prev = argv[optind - 1];
            const char *what =
                (optopt && strncmp(prev, "--", 2) != 0) ? shortopt : prev;
            usage_error(ch == ':' ? "option requires an argument"
                                  : "unknown option", what);
            break;
        }
        default:
            usage_error("unknown option", argv[optind - 1]);
            break;
        }
    }
    if (optind < argc)
        usage_error("unexpected argument", argv[optind]);
    if (cal && *cal == '\0')
        usage_error("empty file name for --cal", NULL);
    if (fresh && *fresh == '\0')
        usage_error("empty file name for --fresh", NULL);

    init_tables();
    period_init(&pcal, day0, CAL_DAYS);
    period_init(&pfresh, day0 + CAL_DAYS, FRESH_DAYS);

    /* Fixed stream order, so each stream depends only on the seed. */
    sm = seed;
    rng_seed(&cal_arr, &sm);
    rng_seed(&cal_attr, &sm);
    rng_seed(&fresh_arr, &sm);
    rng_seed(&fresh_attr, &sm);
    rng_seed(&bench_rng, &sm);

    if (bench) {
        if (fresh_given)
            usage_error("--fresh and --fresh-rows cannot be used with --bench",
                        NULL);
        if (!cal)
            cal = DEFAULT_BENCH;
        if (out_open(&o, cal) != 0)
            return 1;
        write_bench(&o, &pcal, rows, &bench_rng);
        if (out_close(&o) != 0) {
            out_discard(&o);
            return 1;
        }
        fprintf(stderr, PROG ": wrote %llu bench rows (zone,band,pred_s,"
                "actual_s) to %s, seed %llu\n", (unsigned long long)rows,
                strcmp(cal, "-") == 0 ? "standard output" : cal,
                (unsigned long long)seed);
        return 0;
    }

    if (!cal)
        cal = DEFAULT_CAL;
    if (!fresh)
        fresh = DEFAULT_FRESH;
    if (strcmp(cal, "-") == 0 || strcmp(fresh, "-") == 0)
        usage_error("standard output ('-') is only supported with --bench",
                    NULL);
    if (strcmp(cal, fresh) == 0)
        usage_error("--cal and --fresh name the same file", cal);

    /* A failed run leaves neither file behind, not half a pair. */
    if (out_open(&o, cal) != 0)
        return 1;
    write_period(&o, &pcal, rows, 1, &cal_arr, &cal_attr);
    ocal = o;
    if (out_close(&o) != 0) {
        out_discard(&ocal);
        return 1;
    }
    if (out_open(&o, fresh) != 0) {
        out_discard(&ocal);
        return 1;
    }
    write_period(&o, &pfresh, fresh_rows, rows + 1, &fresh_arr, &fresh_attr);
    if (out_close(&o) != 0) {
        out_discard(&o);
        out_discard(&ocal);
        return 1;
    }
    fprintf(stderr, PROG ": wrote %llu rows to %s (2026-10-05 to 2026-11-01)"
            " and %llu rows to %s (2026-11-02 to 2026-11-08), seed %llu\n",
            (unsigned long long)rows, cal, (unsigned long long)fresh_rows,
            fresh, (unsigned long long)seed);
    return 0;
}
