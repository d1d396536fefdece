#include "model/random_draws.h"

#include <boost/math/distributions/normal.hpp>

#include <algorithm>

namespace apsides {

std::mt19937_64 make_stream(std::uint64_t seed, std::uint64_t stream) {
  std::seed_seq seq{static_cast<std::uint32_t>(seed), static_cast<std::uint32_t>(seed >> 32),
                    static_cast<std::uint32_t>(stream), static_cast<std::uint32_t>(stream >> 32),
                    0x6e657374u};
  return std::mt19937_64(seq);
}

double truncated_normal_draw(double mean, double sd, double lo, double hi, std::mt19937_64& rng) {
  const double u = std::uniform_real_distribution<double>(0.0, 1.0)(rng);
  const boost::math::normal unit;
  const double za = (lo - mean) / sd, zb = (hi - mean) / sd;
  double z;
  if (za >= 0.0) {  // upper tail: Q(z) = 1 - Phi(z)
    const double qa = boost::math::cdf(boost::math::complement(unit, za));
    const double qb = boost::math::cdf(boost::math::complement(unit, zb));
    const double q = qa - u * (qa - qb);
    z = q > 0.0 && q < 1.0 ? boost::math::quantile(boost::math::complement(unit, q)) : za;
  } else {
    const double pa = boost::math::cdf(unit, za), pb = boost::math::cdf(unit, std::min(zb, 38.0));
    const double pr = pa + u * (pb - pa);
    z = pr > 0.0 && pr < 1.0 ? boost::math::quantile(unit, pr) : zb;
  }
  return std::clamp(mean + sd * std::clamp(z, za, zb), lo, hi);
}

}  // namespace apsides
