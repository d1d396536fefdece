// Internal: random streams and the truncated-normal draw that nested sampling, the
// evidence problem and the velocity terms' offset draws share.
#pragma once

#include <cstdint>
#include <random>

namespace apsides {

// An independent random stream per (seed, stream id): the same numbers whichever thread
// draws them, which is what makes a run independent of the thread count.
std::mt19937_64 make_stream(std::uint64_t seed, std::uint64_t stream);

// A draw from normal(mean, sd) truncated to [lo, hi], by the inverse CDF, worked from the
// tail the interval sits in so that far-out intervals keep their digits.
double truncated_normal_draw(double mean, double sd, double lo, double hi, std::mt19937_64& rng);

}  // namespace apsides
