/* SPDX-License-Identifier: GPL-3.0-or-later */
/* quantgen.c: a seeded test generator of forecasts whose true coverage is
 * known.  Each row's actual duration is exponential with a mean that
 * depends on its zone and on a covariate, and the forecast columns are the
 * exact quantiles of that distribution, F^-1(tau) = -mean ln(1 - tau)
 * (exponential law), so a correct check finds them calibrated:
 *   zone, mean_s, actual, q10, q50, q90, lo05, hi95, p90, p90_low
 * p90 is the 0.9 quantile; p90_low is it times (1 - SHIFT), whose true
 * on-time rate is 1 - 10^-(1 - SHIFT), below 0.9 for SHIFT > 0.
 * Usage: quantgen [--rows N] [--seed S] [--shift F]   (CSV on stdout) */
#include <getopt.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

static uint64_t state;

/* splitmix64 (Steele, Lea & Flood 2014): small, seeded, the same everywhere */
static uint64_t next(void)
{
    uint64_t z = (state += UINT64_C(0x9E3779B97F4A7C15));
    z = (z ^ (z >> 30)) * UINT64_C(0xBF58476D1CE4E5B9);
    z = (z ^ (z >> 27)) * UINT64_C(0x94D049BB133111EB);
    return z ^ (z >> 31);
}

static double uniform(void) { return ((double)(next() >> 11) + 0.5) / 9007199254740992.0; }

static double q(double mean, double tau) { return -mean * log1p(-tau); }

int main(int argc, char **argv)
{
    long rows = 20000;
    unsigned long long seed = 1;
    double shift = 0.15;
    static const struct option o[] = {{"rows", required_argument, 0, 'n'},
                                      {"seed", required_argument, 0, 's'},
                                      {"shift", required_argument, 0, 'f'},
                                      {0, 0, 0, 0}};
    int c;
    while ((c = getopt_long(argc, argv, "", o, NULL)) != -1) {
        switch (c) {
        case 'n': rows = strtol(optarg, NULL, 10); break;
        case 's': seed = strtoull(optarg, NULL, 10); break;
        case 'f': shift = strtod(optarg, NULL); break;
        default: fprintf(stderr, "usage: quantgen [--rows N] [--seed S] [--shift F]\n"); return 2;
        }
    }
    state = seed;
    static const char *zones[] = {"north", "south", "river"};
    static const double base[] = {900, 1300, 1700};
    printf("zone,mean_s,actual,q10,q50,q90,lo05,hi95,p90,p90_low\n");
    for (long i = 0; i < rows; i++) {
        int z = (int)(next() % 3);
        double mean = base[z] * (0.6 + 0.8 * uniform());
        double y = -mean * log(uniform());
        printf("%s,%.3f,%.3f,%.3f,%.3f,%.3f,%.3f,%.3f,%.3f,%.3f\n", zones[z], mean, y, q(mean, 0.1),
               q(mean, 0.5), q(mean, 0.9), q(mean, 0.05), q(mean, 0.95), q(mean, 0.9),
               q(mean, 0.9) * (1 - shift));
    }
    return fflush(stdout) == 0 ? 0 : 1;
}
