// The radial-velocity model: a sum of Keplerian orbits, a zero point and a jitter per
// instrument, and an optional linear or quadratic trend; and its Gaussian likelihood.
//
// Conventions (pinned by tests/keplerian_model_test.cpp, CHECKS.md section 8):
//   v(t) = gamma_inst + trend(t) + sum_planets K [cos(nu + omega) + e cos omega],
//   nu the true anomaly from Kepler's equation M = E - e sin E, omega the argument of
//   periastron of the STAR's orbit (omega_planet = omega_star + pi), v > 0 receding.
//   The planet's inferior conjunction (transit) is at nu = pi/2 - omega.
//   Times are days relative to the data's reference epoch (see data.h).
//   Trend: c1 (t - t_ref) + c2 (t - t_ref)^2, t_ref the data's reference epoch.
//
// Likelihood: ln L = -1/2 sum_i [ r_i^2 / (s_i^2 + j^2) + ln(2 pi (s_i^2 + j^2)) ],
//   r_i the residual, s_i the stated uncertainty, j the jitter of point i's instrument.
#pragma once

#include <cstddef>
#include <limits>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/gp_kernels.h"
#include "apsides/parameter_blocks.h"

namespace apsides {

// A guess at a periodic signal (a periodogram peak, a planet a search found): where
// nested sampling's mode jumps aim (evidence.h). K and t_conj are NaN when unknown.
struct SignalHint {
  double period_days = 0.0;
  double semi_amplitude_m_s = std::numeric_limits<double>::quiet_NaN();
  double t_conj_days = std::numeric_limits<double>::quiet_NaN();  // days after the reference epoch
};

// One planet in the sampling coordinates.
struct Planet {
  double period_days = 0.0;
  double semi_amplitude_m_s = 0.0;
  double sqrt_e_cos_omega = 0.0;   // sqrt(e) cos(omega_star)
  double sqrt_e_sin_omega = 0.0;   // sqrt(e) sin(omega_star)
  double t_conj_days = 0.0;        // time of inferior conjunction, days after reference epoch

  double ecc() const;        // e = h^2 + k^2
  double omega_rad() const;  // atan2(k, h), in (-pi, pi]; 0 for a circular orbit
  static Planet from_elements(double period_days, double semi_amplitude_m_s, double ecc,
                              double omega_rad, double t_conj_days);
};

// Time conversions (all times in the same frame, days).
// Mean anomaly at conjunction (nu = pi/2 - omega).
double mean_anomaly_at_conjunction(double ecc, double omega_rad);
double time_of_periastron(double period_days, double ecc, double omega_rad, double t_conj_days);
double time_of_conjunction(double period_days, double ecc, double omega_rad, double t_peri_days);
// Time of the secondary eclipse (occultation, nu = 3 pi/2 - omega) after `t_peri_days`.
double time_of_occultation(double period_days, double ecc, double omega_rad, double t_peri_days);
// Mean anomaly (rad, in [0, 2 pi)) at time t.
double mean_anomaly_at(const Planet& planet, double t_days);

// Velocity of the star due to one planet at time t (scalar reference implementation).
double planet_velocity(const Planet& planet, double t_days);

// The model's configuration: how many planets, instruments, which trend, whether jitters
// and transit-time jitters are fitted. The parameter vector theta it gives is a list of
// blocks (parameter_blocks.h: ParameterLayout::from):
//   [planet b: P, K, sqrt(e)cos w, sqrt(e)sin w, t_conj] [planet c: ...] ...
//   [instrument 0: offset, jitter] [instrument 1: ...] ... [trend c1, c2]
//   [transit-time jitter of each planet in transit_jitter_planets, days]
// Without jitters (fit_jitter = false) instruments have only an offset. Transit-time
// jitters belong to the transit-time likelihood (likelihood_terms.h); the velocity model
// ignores them. The index helpers below ask the blocks; code that evaluates theta often
// should keep a ParameterLayout and ask its blocks directly.
enum class Trend { kNone = 0, kLinear = 1, kQuadratic = 2 };
std::string to_string(Trend trend);
Trend parse_trend(const std::string& text, const std::string& where);

// The velocities' noise: white (stated errors and a jitter per instrument), or a
// Gaussian process (stellar activity, gp.h) on top of that white noise ([noise] in the
// project file).
enum class NoiseKind { kWhite, kGaussianProcess };
std::string to_string(NoiseKind kind);
NoiseKind parse_noise_kind(const std::string& text, const std::string& where);  // "white" | "gp"
struct NoiseSettings {
  NoiseKind kind = NoiseKind::kWhite;
  gp::KernelKind kernel = gp::KernelKind::kRotation;
  // One GP amplitude per instrument (relative to the first instrument's): instruments
  // see the same activity with different sensitivities (different wavelength ranges).
  bool per_instrument_amplitude = false;
  bool operator==(const NoiseSettings&) const = default;
};

struct ModelLayout {
  int n_planets = 0;
  int n_instruments = 1;
  Trend trend = Trend::kNone;
  bool fit_jitter = true;
  // Planets (by letter index) whose transit times get a fitted extra scatter
  // ([[transits]] fit_jitter = true), whether or not the model has that planet.
  std::vector<int> transit_jitter_planets;
  NoiseSettings noise;

  int trend_order() const { return static_cast<int>(trend); }
  std::size_t n_params() const;
  std::size_t planet_index(int planet) const;      // the planet's period
  std::size_t offset_index(int instrument) const;
  std::size_t jitter_index(int instrument) const;  // only when fit_jitter
  std::size_t trend_index(int power) const;        // power 1 or 2
  // Index of planet j's transit-time jitter, or -1 when it has none.
  long transit_jitter_index(int planet) const;
  // Parameter names ("b.period_d", "north.offset_ms", "trend.c1_ms_per_d", ...) and
  // their units, in theta order. Planets are labelled b, c, d, ... by position.
  std::vector<std::string> names(const std::vector<std::string>& instrument_names) const;
  std::vector<std::string> units() const;
};

// Planet label for position j (0 -> "b").
std::string planet_label(int index);

Planet planet_from(std::span<const double> theta, const ModelLayout& layout, int planet);
void put_planet(std::span<double> theta, const ModelLayout& layout, int planet, const Planet& p);

// The velocities' likelihood for a sum of Keplerian orbits with instrument offsets,
// white noise (stated errors and jitter) and a trend, bound to a data set: the planet,
// instrument and trend blocks of a ParameterLayout are read, other blocks ignored.
// Thread-safe for concurrent const calls.
class KeplerianModel {
 public:
  KeplerianModel(VelocityData data, ModelLayout layout);
  KeplerianModel(VelocityData data, ParameterLayout parameters);
  ~KeplerianModel();
  KeplerianModel(const KeplerianModel& other);
  KeplerianModel(KeplerianModel&&) noexcept;

  const VelocityData& data() const { return data_; }
  const ModelLayout& layout() const { return layout_; }
  const ParameterLayout& parameters() const;

  // Gaussian log-likelihood (fast kernel, src/kernels/likelihood_kernel.cpp).
  // Returns -inf for unphysical theta (P <= 0, e >= 1, jitter < 0).
  double log_likelihood(std::span<const double> theta) const;
  // Plain scalar implementation of the same, the reference for tests.
  double log_likelihood_reference(std::span<const double> theta) const;

  // Instrument offsets integrated out analytically, for the evidence. The likelihood is
  // Gaussian in each instrument's offset g, whose points it alone shifts, so under a
  // uniform prior on [lower, upper] (density 1 / (upper - lower))
  //   int L dg / (upper - lower) = L(g_hat) sqrt(2 pi / S) [Phi(z_upper) - Phi(z_lower)] / (upper - lower),
  // g_hat = the weighted-mean residual, S = sum 1 / var_i, z = (bound - g_hat) sqrt(S):
  // exact, truncation included. Returns ln of that, with the listed instruments' offsets
  // integrated out and their entries in theta ignored. With `conditionals`, also each
  // listed offset's conditional posterior given the rest of theta: normal(mean, sd)
  // truncated to [lower, upper].
  struct IntegratedOffset {
    int instrument = 0;
    double lower_m_s = 0.0, upper_m_s = 0.0;
  };
  struct OffsetConditional {
    double mean_m_s = 0.0, sd_m_s = 0.0, lower_m_s = 0.0, upper_m_s = 0.0;
  };
  double log_likelihood_offsets_integrated(std::span<const double> theta,
                                           std::span<const IntegratedOffset> integrated,
                                           std::vector<OffsetConditional>* conditionals = nullptr) const;

  // Sum of the planets' velocities (no offsets or trend) at arbitrary times.
  void planets_velocity(std::span<const double> theta, std::span<const double> t_days,
                        std::span<double> out) const;
  // Full model at the data points (planets + offset + trend).
  std::vector<double> predict(std::span<const double> theta) const;
  // Observed minus model at the data points.
  std::vector<double> residuals(std::span<const double> theta) const;
  // Chi-square (with jitter added in quadrature to the stated errors).
  double chi_square(std::span<const double> theta) const;
  // Stated variance plus the jitter of the point's instrument, at each data point.
  std::vector<double> variances(std::span<const double> theta) const;

 private:
  struct Blocks;  // the planet, instrument and trend blocks, resolved once
  VelocityData data_;
  ModelLayout layout_;
  std::unique_ptr<Blocks> blocks_;
  // The data regrouped by instrument for the fast likelihood (built by the constructor):
  // instrument i owns entries [block_start_[i], block_start_[i + 1]).
  std::vector<double> block_time_days_, block_velocity_m_s_, block_variance_m2_s2_;
  std::vector<std::size_t> block_start_;
};

}  // namespace apsides
