// The likelihood as a sum of terms, each over one data set, and the signal they share.
//
//   ln L(theta) = sum over terms of ln L_term(theta)
//
// Terms: the velocities (instrument offsets, a trend, and white noise -- stated errors and
// a jitter per instrument -- or a Gaussian process on top of it), and the mid-transit
// times of each planet that has them (T_n = T_conj + n P; an optional extra scatter). A
// term declares the blocks it reads (parameter_blocks.h).
//
// The signal is what the planets do to the observables: the star's velocity at given
// times and each transiting planet's mid-transit times. The Keplerian signal is a sum of
// independent orbits, so its transit times are the linear ephemeris of the planet block;
// the velocity term evaluates a Keplerian signal with the fused SIMD kernel
// (src/kernels/likelihood_kernel.cpp) in the same pass as its noise model.
#pragma once

#include <cstddef>
#include <memory>
#include <random>
#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/gp.h"
#include "apsides/keplerian_model.h"
#include "apsides/parameter_blocks.h"

namespace apsides {

class TransitTimingLikelihood;

// What the planets do to the observables.
class Signal {
 public:
  virtual ~Signal();
  // The star's velocity (m/s) from every planet at times t (days after the data's
  // reference epoch), written to out.
  virtual void velocity(std::span<const double> theta, std::span<const double> t, std::span<double> out) const = 0;
  // true when every planet's transit times are its block's linear ephemeris
  // T_n = T_conj + n P (independent Keplerian orbits): terms may then use the closed form.
  virtual bool linear_transit_times() const = 0;
};

// Independent Keplerian orbits, one per planet block.
class KeplerianSignal final : public Signal {
 public:
  explicit KeplerianSignal(const ParameterLayout& layout);
  void velocity(std::span<const double> theta, std::span<const double> t, std::span<double> out) const override;
  bool linear_transit_times() const override { return true; }

 private:
  std::vector<const PlanetBlock*> planets_;
};

class LikelihoodTerm {
 public:
  virtual ~LikelihoodTerm();
  virtual std::string name() const = 0;         // "velocities", "transit times of b"
  virtual std::size_t n_points() const = 0;     // data points it explains
  virtual std::vector<const ParameterBlock*> reads() const = 0;
  // ln L of the term; -inf where the model cannot be evaluated (P <= 0, e >= 1, ...).
  virtual double log_likelihood(std::span<const double> theta) const = 0;
  // For the MAP fit: sets the parameters the term holds linearly (where `free_linear`
  // is true) to their conditional optimum given the rest of theta, and returns ln L
  // there. Terms without linear parameters return log_likelihood(theta).
  virtual double log_likelihood_profiled(std::span<double> theta, const std::vector<bool>& free_linear) const;
};

// The velocities: a signal (the planets) plus, per instrument, an offset and a trend
// (linear parameters), and a noise model. The part every noise model shares is here;
// WhiteNoiseVelocityTerm and GpVelocityTerm say how the residuals are weighed.
class VelocityTerm : public LikelihoodTerm {
 public:
  VelocityTerm(const VelocityData& data, const ParameterLayout& layout);
  VelocityTerm(const VelocityTerm&) = delete;
  VelocityTerm& operator=(const VelocityTerm&) = delete;
  std::string name() const override { return "velocities"; }
  std::size_t n_points() const override { return data_.size(); }
  std::vector<const ParameterBlock*> reads() const override;
  const VelocityData& data() const { return data_; }

  // For nested sampling: the listed instruments' offsets integrated out analytically under
  // their uniform priors; with `conditionals`, also each offset's conditional posterior
  // given the rest (the draws of complete_offsets use them).
  virtual double log_likelihood_offsets_integrated(std::span<const double> theta,
                                                   std::span<const KeplerianModel::IntegratedOffset> integrated,
                                                   std::vector<KeplerianModel::OffsetConditional>* conditionals) const = 0;
  // Writes the integrated offsets into theta: drawn from their conditional posterior with
  // `rng`, else their most probable values.
  virtual void complete_offsets(std::span<double> theta, std::span<const KeplerianModel::IntegratedOffset> integrated,
                                std::mt19937_64* rng) const = 0;
  // Observed minus the deterministic model (planets, offsets, trend) at the data points,
  // less the noise model's own prediction when `remove_correlated_noise` (a GP's
  // conditional mean): what a periodogram of residuals should see. `sigma`: the white
  // part, sqrt(error^2 + jitter^2).
  virtual void residuals(std::span<const double> theta, bool remove_correlated_noise, std::vector<double>& r,
                         std::vector<double>& sigma) const = 0;

 protected:
  struct LinearColumn {
    std::size_t index;  // theta index
    int instrument;     // the offset of this instrument, or -1 for a trend coefficient
    int power;          // the trend's power (1, 2)
  };
  // The signal at the data points (sum of Keplerians); false when theta cannot be evaluated.
  bool signal_at_data(std::span<const double> theta, std::vector<double>& out) const;
  double linear_value(std::span<const double> theta, std::size_t i) const;
  double linear_column(const LinearColumn& column, std::size_t i) const;
  // Stated variance + jitter^2 per point; false when a jitter is negative or not finite.
  bool white_variances(std::span<const double> theta, std::vector<double>& out) const;
  std::vector<const LinearColumn*> free_columns(const std::vector<bool>& free_linear) const;

  VelocityData data_;
  const ParameterLayout* layout_;  // the posterior's blocks (stable: the posterior owns them)
  std::vector<const PlanetBlock*> planets_;
  std::vector<const InstrumentBlock*> instruments_;
  const TrendBlock* trend_;
  std::vector<LinearColumn> linear_;  // offsets and trend coefficients, in theta order
};

// White noise: variance stated error^2 + jitter^2 (keplerian_model.h has the formulas and
// the fused SIMD kernel this term evaluates).
class WhiteNoiseVelocityTerm final : public VelocityTerm {
 public:
  WhiteNoiseVelocityTerm(const VelocityData& data, const ParameterLayout& layout);
  double log_likelihood(std::span<const double> theta) const override;
  // Offsets and trend coefficients by weighted linear least squares (weights
  // 1 / (error^2 + jitter^2)), the fixed ones kept.
  double log_likelihood_profiled(std::span<double> theta, const std::vector<bool>& free_linear) const override;
  double log_likelihood_offsets_integrated(std::span<const double> theta,
                                           std::span<const KeplerianModel::IntegratedOffset> integrated,
                                           std::vector<KeplerianModel::OffsetConditional>* conditionals) const override;
  void complete_offsets(std::span<double> theta, std::span<const KeplerianModel::IntegratedOffset> integrated,
                        std::mt19937_64* rng) const override;
  void residuals(std::span<const double> theta, bool remove_correlated_noise, std::vector<double>& r,
                 std::vector<double>& sigma) const override;
  const KeplerianModel& model() const { return model_; }

 private:
  bool solve_linear(const std::vector<const LinearColumn*>& free, const std::vector<double>& signal,
                    const std::vector<double>& w, std::span<double> theta) const;
  KeplerianModel model_;
};

// Correlated noise: a Gaussian process (gp.h) with the GpBlock's kernel, on top of the
// white noise. Semiseparable kernels in O(N J^2), the quasi-periodic kernel densely
// (O(N^3): N <~ 1000). The velocities must be in time order (VelocityData is).
class GpVelocityTerm final : public VelocityTerm {
 public:
  GpVelocityTerm(const VelocityData& data, const ParameterLayout& layout);
  std::vector<const ParameterBlock*> reads() const override;
  double log_likelihood(std::span<const double> theta) const override;
  // Offsets and trend by generalised least squares under the GP covariance.
  double log_likelihood_profiled(std::span<double> theta, const std::vector<bool>& free_linear) const override;
  // Gaussian integral over the offsets under the GP: ln L(beta_hat) + M/2 ln(2 pi)
  // - 1/2 ln|A^T K^-1 A| - sum ln(width), the prior box's truncation taken per offset
  // from its marginal (the default box is tens of standard deviations wide).
  double log_likelihood_offsets_integrated(std::span<const double> theta,
                                           std::span<const KeplerianModel::IntegratedOffset> integrated,
                                           std::vector<KeplerianModel::OffsetConditional>* conditionals) const override;
  void complete_offsets(std::span<double> theta, std::span<const KeplerianModel::IntegratedOffset> integrated,
                        std::mt19937_64* rng) const override;
  void residuals(std::span<const double> theta, bool remove_correlated_noise, std::vector<double>& r,
                 std::vector<double>& sigma) const override;
  // The activity signal's conditional mean and standard deviation at times t (days after
  // the reference epoch), for instrument `instrument`'s amplitude, given the residuals of
  // the deterministic model at theta.
  gp::Prediction predict(std::span<const double> theta, std::span<const double> t_days, int instrument = 0,
                         bool with_sd = true) const;

 private:
  struct Workspace;
  static Workspace& workspace();  // one per thread
  // Factors K at theta into the thread's workspace; "" or a message.
  std::string factor(std::span<const double> theta, Workspace& ws) const;
  double integrated_offsets(std::span<const double> theta, std::span<const KeplerianModel::IntegratedOffset> integrated,
                            std::vector<double>* mean, std::vector<double>* covariance) const;
  const GpBlock* gp_;
};

// The mid-transit times of one planet: T_n = T_conj + n P from the planet's orbit block
// (a planet, or a transit-only ephemeris), with an optional extra scatter in quadrature.
class TransitTimesTerm final : public LikelihoodTerm {
 public:
  TransitTimesTerm(const TransitData& times, double frame_reference_epoch_bjd, const OrbitBlock& orbit,
                   const TransitJitterBlock* jitter);
  ~TransitTimesTerm() override;
  std::string name() const override { return "transit times of " + orbit_->label(); }
  std::size_t n_points() const override;
  std::vector<const ParameterBlock*> reads() const override;
  double log_likelihood(std::span<const double> theta) const override;
  const OrbitBlock& orbit() const { return *orbit_; }
  const TransitData& times() const { return times_; }

 private:
  TransitData times_;
  std::unique_ptr<TransitTimingLikelihood> like_;
  const OrbitBlock* orbit_;
  const TransitJitterBlock* jitter_;
};

}  // namespace apsides
