/* SPDX-License-Identifier: GPL-3.0-or-later */
/* seed.c: one user seed, several independent random streams.
 *
 * Every random choice of the library (the held-out rows, the split of
 * method qr, the subsamples of the quantile regression's preprocessing, the
 * bootstrap resamples) seeds its own generator from etacal_seed_stream(seed,
 * its stream number), so that two choices asked for in one run never draw
 * the same numbers: a random held-out share and the qr split of the rows
 * left are then independent, and each keeps its documented share.
 *
 * The stream's seed is output number `stream` of SplitMix64 started at the
 * user's seed (Steele, Lea & Flood 2014, "Fast splittable pseudorandom
 * number generators", OOPSLA): the state advances by the golden gamma
 * 0x9e3779b97f4a7c15 (2^64 / golden ratio, odd) and each output goes
 * through the mixing function with Stafford's "variant 13" constants
 * 0xbf58476d1ce4e5b9 and 0x94d049bb133111eb and shifts 30, 27, 31, as in
 * Vigna's reference splitmix64.c and Java's java.util.SplittableRandom. */
#include "base.h"

uint64_t etacal_seed_stream(uint64_t seed, unsigned stream)
{
    uint64_t z = seed + (uint64_t)stream * UINT64_C(0x9e3779b97f4a7c15);
    z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
    z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
    return z ^ (z >> 31);
}
