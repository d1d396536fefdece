// One posterior, composed: the parameter blocks (parameter_blocks.h), their priors
// (prior.h), and the likelihood terms (likelihood_terms.h).
//
//   ln p(theta | data) = ParameterLayout::log_prior(theta) + sum over terms ln L_term(theta) + const
//
// The MAP fit (fit.h), the ensemble sampler (sampling_run.h) and nested sampling
// (evidence.h) all evaluate a PosteriorModel; none of them counts positions in theta.
// `make_posterior` builds the model of a configuration (ModelLayout): a new kind of block
// or term is added there and nowhere in the stages.
#pragma once

#include <memory>
#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/keplerian_model.h"
#include "apsides/likelihood_terms.h"
#include "apsides/parameter_blocks.h"
#include "apsides/prior.h"

namespace apsides {

class PosteriorModel {
 public:
  PosteriorModel(ParameterLayout layout, ModelPriors priors);
  PosteriorModel(PosteriorModel&&) noexcept;
  PosteriorModel& operator=(PosteriorModel&&) noexcept;
  ~PosteriorModel();

  // Adds a term; it may keep pointers to this model's blocks (layout() is stable).
  void add_term(std::unique_ptr<LikelihoodTerm> term);

  const ParameterLayout& layout() const { return *layout_; }
  const ModelPriors& priors() const { return priors_; }
  const std::vector<std::unique_ptr<LikelihoodTerm>>& terms() const { return terms_; }
  std::size_t n_params() const { return layout_->n_params(); }
  std::vector<std::string> names() const { return layout_->names(); }
  // Data points over all terms (for BIC/AICc).
  std::size_t n_points() const;
  std::size_t n_transit_points() const;  // those of the transit-time terms
  const VelocityTerm* velocities() const;  // null when the model has none

  double log_prior(std::span<const double> theta) const;
  double log_likelihood(std::span<const double> theta) const;
  // ln prior + ln L, -inf outside the prior (the likelihood is then not evaluated).
  double log_posterior(std::span<const double> theta) const;
  // The transit-time terms' part of ln L.
  double transit_log_likelihood(std::span<const double> theta) const;

 private:
  std::unique_ptr<ParameterLayout> layout_;  // on the heap: terms point into its blocks
  ModelPriors priors_;
  std::vector<std::unique_ptr<LikelihoodTerm>> terms_;
};

// The posterior of a configuration: the blocks of `layout` (ParameterLayout::from), the
// velocities' term, and for each planet of the model whose letter labels rows of
// `transits`, its transit-time term.
PosteriorModel make_posterior(const VelocityData& data, const ModelLayout& layout, ModelPriors priors,
                              const TransitData& transits);
// Same for an explicit layout of blocks (planets, instruments, transit-only ephemerides, ...):
// transit-time terms for every orbit block whose letter labels transit times.
PosteriorModel make_posterior(const VelocityData& data, ParameterLayout layout, ModelPriors priors,
                              const TransitData& transits);

}  // namespace apsides
