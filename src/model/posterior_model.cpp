#include "apsides/posterior_model.h"

#include <cmath>
#include <limits>

namespace apsides {

PosteriorModel::PosteriorModel(ParameterLayout layout, ModelPriors priors)
    : layout_(std::make_unique<ParameterLayout>(std::move(layout))), priors_(std::move(priors)) {}
PosteriorModel::PosteriorModel(PosteriorModel&&) noexcept = default;
PosteriorModel& PosteriorModel::operator=(PosteriorModel&&) noexcept = default;
PosteriorModel::~PosteriorModel() = default;

void PosteriorModel::add_term(std::unique_ptr<LikelihoodTerm> term) { terms_.push_back(std::move(term)); }

std::size_t PosteriorModel::n_points() const {
  std::size_t n = 0;
  for (const auto& t : terms_) n += t->n_points();
  return n;
}

std::size_t PosteriorModel::n_transit_points() const {
  std::size_t n = 0;
  for (const auto& t : terms_)
    if (dynamic_cast<const TransitTimesTerm*>(t.get()) != nullptr) n += t->n_points();
  return n;
}

const VelocityTerm* PosteriorModel::velocities() const {
  for (const auto& t : terms_)
    if (const auto* v = dynamic_cast<const VelocityTerm*>(t.get())) return v;
  return nullptr;
}

double PosteriorModel::log_prior(std::span<const double> theta) const { return layout_->log_prior(theta, priors_); }

double PosteriorModel::log_likelihood(std::span<const double> theta) const {
  double l = 0.0;
  for (const auto& t : terms_) {
    l += t->log_likelihood(theta);
    if (!std::isfinite(l)) return l;
  }
  return l;
}

double PosteriorModel::log_posterior(std::span<const double> theta) const {
  const double lp = log_prior(theta);
  return std::isfinite(lp) ? lp + log_likelihood(theta) : lp;
}

double PosteriorModel::transit_log_likelihood(std::span<const double> theta) const {
  double s = 0.0;
  for (const auto& t : terms_)
    if (dynamic_cast<const TransitTimesTerm*>(t.get()) != nullptr) s += t->log_likelihood(theta);
  return s;
}

PosteriorModel make_posterior(const VelocityData& data, const ModelLayout& layout, ModelPriors priors,
                              const TransitData& transits) {
  return make_posterior(data, ParameterLayout::from(layout, data.instrument_names), std::move(priors), transits);
}

PosteriorModel make_posterior(const VelocityData& data, ParameterLayout layout, ModelPriors priors,
                              const TransitData& transits) {
  PosteriorModel model(std::move(layout), std::move(priors));
  const ParameterLayout& L = model.layout();
  if (L.gaussian_process() != nullptr) model.add_term(std::make_unique<GpVelocityTerm>(data, L));
  else model.add_term(std::make_unique<WhiteNoiseVelocityTerm>(data, L));
  if (transits.size() == 0) return model;
  // Transit terms in letter order (b, c, ...), whatever the order of the blocks.
  for (int letter = 0; letter < 26; ++letter) {
    const std::string label = planet_label(letter);
    const OrbitBlock* orbit = L.orbit(label);
    if (orbit == nullptr) continue;
    const TransitData td = transits.for_planet(label);
    if (td.size() == 0) continue;
    model.add_term(std::make_unique<TransitTimesTerm>(td, data.reference_epoch_bjd, *orbit, L.transit_jitter(label)));
  }
  return model;
}

}  // namespace apsides
