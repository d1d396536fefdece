// The generic parts of a parameter block and the layout of blocks (parameter_blocks.h).
// The planet block lives in planet_block.cpp, the small blocks in simple_blocks.cpp.
#include "apsides/parameter_blocks.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/keplerian_model.h"
#include "model/prior_context.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
}  // namespace

std::string to_string(BlockKind kind) {
  switch (kind) {
    case BlockKind::kPlanet: return "planet";
    case BlockKind::kInstrument: return "instrument";
    case BlockKind::kTrend: return "trend";
    case BlockKind::kTransitJitter: return "transit_jitter";
    case BlockKind::kTransitEphemeris: return "transit_ephemeris";
    case BlockKind::kGaussianProcess: return "gaussian_process";
    case BlockKind::kNbodyPlanet: return "nbody_planet";
  }
  return "unknown";
}

ParameterBlock::ParameterBlock(BlockKind kind, std::string label) : kind_(kind), label_(std::move(label)) {}
ParameterBlock::~ParameterBlock() = default;

const Prior& ParameterBlock::prior_of(const ModelPriors& priors, int slot) const {
  return priors.parameter.at(index(slot));
}

void ParameterBlock::check_override(int, const Prior&, const std::string&) const {}

void ParameterBlock::finish_priors(const PriorContext&, const std::vector<std::string>&, ModelPriors&) const {}

bool ParameterBlock::joint_slot(int) const { return false; }

double ParameterBlock::joint_log_prior(std::span<const double>, const ModelPriors&) const { return 0.0; }

std::vector<std::string> ParameterBlock::describe_priors(const ModelPriors& priors) const {
  std::vector<std::string> out;
  for (int s = 0; s < size(); ++s) out.push_back(fmt::format("{:<22} {}", info(s).name, prior_of(priors, s).describe()));
  return out;
}

std::pair<double, double> ParameterBlock::fit_bounds(int, std::span<const double>, const Prior& p) const {
  return finite_bounds(p, p.lower(), p.upper());
}

std::pair<double, double> ParameterBlock::finite_bounds(const Prior& p, double lo, double hi) {
  if (!std::isfinite(lo)) lo = p.kind == PriorKind::kNormal ? p.a - 20.0 * p.b : -1e12;
  if (!std::isfinite(hi)) {
    if (p.kind == PriorKind::kHalfNormal) hi = 8.0 * p.a;
    else if (p.kind == PriorKind::kNormal) hi = p.a + 20.0 * p.b;
    else hi = 1e12;
  }
  return {lo, hi};
}

double ParameterBlock::fit_step(int slot, std::span<const double> theta, double, double width) const {
  return std::max(0.1 * std::fabs(value(theta, slot)), 0.2 * std::max(width * 1e-3, 0.1));
}

double ParameterBlock::fit_start(int, const Prior& prior) const {
  return prior.kind == PriorKind::kFixed ? prior.a : 0.0;
}

double ParameterBlock::fit_regularise(std::span<double>, const ModelPriors&) const { return 0.0; }

double ParameterBlock::fit_joint_log_prior(std::span<const double>, const ModelPriors&) const { return 0.0; }

double ParameterBlock::ball_scale(int slot, std::span<const double> theta) const {
  return 1e-3 * std::abs(value(theta, slot)) + 1e-3;
}

std::vector<CubeCoordinate> ParameterBlock::cube_coordinates(const ModelPriors& priors, bool,
                                                             const std::vector<bool>& skip) const {
  std::vector<CubeCoordinate> out;
  for (int s = 0; s < size(); ++s)
    if (!skip[index(s)] && prior_of(priors, s).kind != PriorKind::kFixed) out.push_back({s, CubeRole::kQuantile});
  return out;
}

void ParameterBlock::from_cube(std::span<const double> u, std::span<const CubeCoordinate> coords,
                               const ModelPriors& priors, std::span<double> theta) const {
  for (std::size_t c = 0; c < coords.size(); ++c)
    theta[index(coords[c].slot)] = prior_of(priors, coords[c].slot).quantile(u[c]);
}

void ParameterBlock::swap_values(std::span<double> theta, const ParameterBlock& other) const {
  if (other.kind() != kind() || other.size() != size())
    throw std::logic_error("swap_values: blocks of different shapes");
  for (int s = 0; s < size(); ++s) std::swap(theta[index(s)], theta[other.index(s)]);
}

int OrbitBlock::letter() const {
  return label().size() == 1 && label()[0] >= 'b' && label()[0] <= 'z' ? label()[0] - 'b' : -1;
}

// ---- The layout ---------------------------------------------------------------------------

ParameterLayout::ParameterLayout(const ParameterLayout& other) : n_params_(other.n_params_) {
  for (const auto& b : other.blocks_) blocks_.push_back(b->clone());
}

ParameterLayout& ParameterLayout::operator=(const ParameterLayout& other) {
  if (this != &other) {
    ParameterLayout copy(other);
    *this = std::move(copy);
  }
  return *this;
}

void ParameterLayout::add(std::unique_ptr<ParameterBlock> block) {
  block->first_ = n_params_;
  n_params_ += static_cast<std::size_t>(block->size());
  blocks_.push_back(std::move(block));
}

ParameterLayout ParameterLayout::from(const ModelLayout& layout, const std::vector<std::string>& instrument_names) {
  ParameterLayout out;
  for (int j = 0; j < layout.n_planets; ++j) out.add(std::make_unique<PlanetBlock>(planet_label(j)));
  for (int i = 0; i < layout.n_instruments; ++i) {
    const std::string name = static_cast<std::size_t>(i) < instrument_names.size()
                                 ? instrument_names[static_cast<std::size_t>(i)]
                                 : fmt::format("instrument{}", i + 1);
    out.add(std::make_unique<InstrumentBlock>(name, i, layout.fit_jitter));
  }
  if (layout.trend_order() > 0) out.add(std::make_unique<TrendBlock>(layout.trend_order()));
  for (int j : layout.transit_jitter_planets) out.add(std::make_unique<TransitJitterBlock>(planet_label(j)));
  if (layout.noise.kind == NoiseKind::kGaussianProcess) {
    std::vector<std::string> names;
    for (int i = 0; i < layout.n_instruments; ++i)
      names.push_back(static_cast<std::size_t>(i) < instrument_names.size() ? instrument_names[static_cast<std::size_t>(i)]
                                                                          : fmt::format("instrument{}", i + 1));
    out.add(std::make_unique<GpBlock>(layout.noise.kernel, names, layout.noise.per_instrument_amplitude));
  }
  return out;
}

std::vector<std::string> ParameterLayout::names() const {
  std::vector<std::string> out;
  for (const auto& b : blocks_)
    for (int s = 0; s < b->size(); ++s) out.push_back(b->info(s).name);
  return out;
}

std::vector<std::string> ParameterLayout::units() const {
  std::vector<std::string> out;
  for (const auto& b : blocks_)
    for (int s = 0; s < b->size(); ++s) out.push_back(b->info(s).unit);
  return out;
}

const ParameterBlock& ParameterLayout::block_at(std::size_t i) const& {
  for (const auto& b : blocks_)
    if (i >= b->first() && i < b->first() + static_cast<std::size_t>(b->size())) return *b;
  throw std::out_of_range(fmt::format("parameter index {} is beyond the model's {} parameters", i, n_params_));
}

std::size_t ParameterLayout::find(const std::string& name) const {
  for (const auto& b : blocks_)
    for (int s = 0; s < b->size(); ++s)
      if (b->info(s).name == name) return b->index(s);
  return npos;
}

std::vector<const PlanetBlock*> ParameterLayout::planets() const& {
  std::vector<const PlanetBlock*> out;
  for (const auto& b : blocks_)
    if (b->kind() == BlockKind::kPlanet) out.push_back(static_cast<const PlanetBlock*>(b.get()));
  return out;
}

std::vector<const InstrumentBlock*> ParameterLayout::instruments() const& {
  std::vector<const InstrumentBlock*> out;
  for (const auto& b : blocks_)
    if (b->kind() == BlockKind::kInstrument) out.push_back(static_cast<const InstrumentBlock*>(b.get()));
  std::stable_sort(out.begin(), out.end(),
                   [](const InstrumentBlock* a, const InstrumentBlock* c) { return a->instrument() < c->instrument(); });
  return out;
}

std::vector<const OrbitBlock*> ParameterLayout::orbits() const& {
  std::vector<const OrbitBlock*> out;
  for (const auto& b : blocks_)
    if (b->kind() == BlockKind::kPlanet || b->kind() == BlockKind::kTransitEphemeris ||
        b->kind() == BlockKind::kNbodyPlanet)
      out.push_back(static_cast<const OrbitBlock*>(b.get()));
  return out;
}

const TrendBlock* ParameterLayout::trend() const& {
  for (const auto& b : blocks_)
    if (b->kind() == BlockKind::kTrend) return static_cast<const TrendBlock*>(b.get());
  return nullptr;
}

const TransitJitterBlock* ParameterLayout::transit_jitter(const std::string& planet_label) const& {
  for (const auto& b : blocks_)
    if (b->kind() == BlockKind::kTransitJitter && b->label() == planet_label)
      return static_cast<const TransitJitterBlock*>(b.get());
  return nullptr;
}

const GpBlock* ParameterLayout::gaussian_process() const& {
  for (const auto& b : blocks_)
    if (b->kind() == BlockKind::kGaussianProcess) return static_cast<const GpBlock*>(b.get());
  return nullptr;
}

const OrbitBlock* ParameterLayout::orbit(const std::string& label) const& {
  for (const OrbitBlock* o : orbits())
    if (o->label() == label) return o;
  return nullptr;
}

const PlanetBlock& ParameterLayout::planet(int position) const& {
  const auto ps = planets();
  if (position < 0 || static_cast<std::size_t>(position) >= ps.size())
    throw std::out_of_range(fmt::format("planet {} of a model with {} planets", position, ps.size()));
  return *ps[static_cast<std::size_t>(position)];
}

double ParameterLayout::log_prior(std::span<const double> theta, const ModelPriors& priors) const {
  // The one-dimensional priors in theta order, then the joint ones, then the ordering.
  double lp = 0.0;
  for (const auto& b : blocks_) {
    for (int s = 0; s < b->size(); ++s) {
      if (b->joint_slot(s)) continue;
      const Prior& p = priors.parameter[b->index(s)];
      const double x = theta[b->index(s)];
      const double l = p.kind == PriorKind::kFixed ? (x == p.a ? 0.0 : -kInf) : p.log_density(x);
      if (!std::isfinite(l)) return -kInf;
      lp += l;
    }
  }
  for (const auto& b : blocks_) {
    const double l = b->joint_log_prior(theta, priors);
    if (!std::isfinite(l)) return -kInf;
    lp += l;
  }
  if (first_unordered_planet(theta, priors) >= 0) return -kInf;
  return lp;
}

int ParameterLayout::first_unordered_planet(std::span<const double> theta, const ModelPriors& priors) const {
  if (!priors.order_periods) return -1;
  const PlanetBlock* previous = nullptr;
  int position = 0;
  for (const PlanetBlock* p : planets()) {
    if (!priors.is_label_fixed(p->letter())) {
      if (previous != nullptr && !(p->period(theta) > previous->period(theta))) return position;
      previous = p;
    }
    ++position;
  }
  return -1;
}

std::string ParameterLayout::outside_support(std::span<const double> theta, const ModelPriors& priors) const {
  for (const auto& b : blocks_)
    for (int s = 0; s < b->size(); ++s) {
      if (b->joint_slot(s)) continue;
      const Prior& p = priors.parameter[b->index(s)];
      const double x = theta[b->index(s)];
      const bool ok = p.kind == PriorKind::kFixed ? x == p.a : std::isfinite(p.log_density(x));
      if (!ok) return b->info(s).name;
    }
  for (const auto& b : blocks_)
    if (!std::isfinite(b->joint_log_prior(theta, priors))) return b->joint_name();
  if (const int j = first_unordered_planet(theta, priors); j >= 0) return planet(j).info(PlanetBlock::kPeriod).name;
  return "";
}

std::vector<std::string> ParameterLayout::describe_priors(const ModelPriors& priors) const {
  std::vector<std::string> out;
  for (const auto& b : blocks_)
    for (auto& line : b->describe_priors(priors)) out.push_back(std::move(line));
  return out;
}

std::vector<std::string> ParameterLayout::prior_notes(const ModelPriors& priors) const {
  std::vector<std::string> out;
  const auto ps = planets();
  if (priors.order_periods && ps.size() > 1) {
    std::string fixed;
    for (const PlanetBlock* p : ps)
      if (priors.is_label_fixed(p->letter())) fixed += (fixed.empty() ? "" : ", ") + p->label();
    out.push_back(fixed.empty() ? "planets ordered by period: P_b < P_c < ..."
                                : fmt::format("planets ordered by period, except {} named by transit times", fixed));
  }
  if (priors.periastron_limit_active() && !ps.empty())
    out.push_back(fmt::format("orbits with periastron a(1 - e) inside the star, < {:.3g} R_sun, excluded",
                              priors.min_periastron_au * constants::kAu / constants::kRSun));
  return out;
}

double ParameterLayout::fit_log_prior(std::span<const double> theta, const ModelPriors& priors) const {
  double lp = 0.0;
  for (const auto& b : blocks_) {
    for (int s = 0; s < b->size(); ++s) {
      if (b->joint_slot(s)) continue;
      const Prior& p = priors.parameter[b->index(s)];
      if (p.kind == PriorKind::kFixed) continue;
      lp += p.log_density(std::clamp(theta[b->index(s)], p.lower(), p.upper()));
    }
  }
  for (const auto& b : blocks_) lp += b->fit_joint_log_prior(theta, priors);
  return lp;
}

double ParameterLayout::fit_regularise(std::span<double> theta, const ModelPriors& priors) const {
  double penalty = 0.0;
  for (const auto& b : blocks_) penalty += b->fit_regularise(theta, priors);
  return penalty;
}

void transfer_parameters(const ParameterLayout& from, std::span<const double> from_theta, const ParameterLayout& to,
                         std::span<double> to_theta) {
  for (const auto& b : to.blocks())
    for (int s = 0; s < b->size(); ++s)
      if (const std::size_t i = from.find(b->info(s).name); i != ParameterLayout::npos)
        to_theta[b->index(s)] = from_theta[i];
}

ModelPriors restrict_priors(const ParameterLayout& from, const ModelPriors& from_priors, const ParameterLayout& to) {
  ModelPriors out = from_priors;
  out.parameter.assign(to.n_params(), Prior{});
  for (const auto& b : to.blocks())
    for (int s = 0; s < b->size(); ++s) {
      const std::size_t i = from.find(b->info(s).name);
      if (i == ParameterLayout::npos)
        throw std::logic_error("restrict_priors: parameter " + b->info(s).name + " has no prior in the larger model");
      out.parameter[b->index(s)] = from_priors.parameter[i];
    }
  return out;
}

}  // namespace apsides
