// A posterior's parameters as named blocks.
//
// theta, the vector every stage works on (fit, ensemble sampler, nested sampling, results
// file), is the concatenation of blocks, each owning a few named parameters:
//
//   planet          b.period_d  b.K_ms  b.secosw  b.sesinw  b.t_conj_d      (Keplerian orbit)
//   instrument      <name>.offset_ms  [<name>.jitter_ms]                    (zero point, extra noise)
//   trend           trend.c1_ms_per_d  [trend.c2_ms_per_d2]                 (about the reference epoch)
//   transit_jitter  <p>.transit_jitter_d                                    (extra transit-time scatter)
//   transit_ephemeris <p>.period_d  <p>.t_conj_d   (a transiting body whose velocity signal a model
//                                                   leaves out: nested sampling's smaller models)
//   gaussian_process gp.<kernel parameter> ... [gp.scale_<instrument> ...]   (activity noise)
//
// A block knows its parameters' names and units, which of them enter the velocity model
// linearly (profiled by the fit, integrable by nested sampling), its default priors and
// how [priors] overrides apply, its joint prior (a planet's eccentricity acts on the pair
// (sqrt(e) cos w, sqrt(e) sin w) and its periastron must clear the star), how the
// optimiser should step and bound it, how the ensemble sampler's starting ball spreads
// it, and how nested sampling maps the unit cube onto it. Code outside the blocks asks a
// block for "its period" (PlanetBlock::period(theta)) instead of counting positions.
//
// ParameterLayout is the ordered list of blocks of one model; ModelLayout (keplerian_model.h)
// is the configuration it is built from. Names in JSON and HDF5 are the blocks' names.
#pragma once

#include <cstddef>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "apsides/gp_kernels.h"
#include "apsides/prior.h"

namespace apsides {

struct ModelLayout;
struct Planet;
struct PriorContext;  // defined in src/model (data statistics the defaults use)

enum class BlockKind {
  kPlanet,
  kInstrument,
  kTrend,
  kTransitJitter,
  kTransitEphemeris,
  kGaussianProcess,
  kNbodyPlanet,  // a planet of an N-body model (nbody_model.h)
};
std::string to_string(BlockKind kind);

// One entry of theta.
struct ParameterInfo {
  std::string name;     // "b.period_d"
  std::string unit;     // "d", "m/s", "1", ...
  bool linear = false;  // enters the velocity model linearly (offsets, trend coefficients)
};

// How nested sampling draws one parameter from the unit cube.
enum class CubeRole {
  kQuantile,      // the parameter's 1-D prior quantile
  kEccentricity,  // e from the block's eccentricity prior (with the omega coordinate, gives h, k)
  kOmega,         // omega uniform in [-pi, pi)
  kPhase,         // t_conj uniform over one period centred on its prior's window
};
struct CubeCoordinate {
  int slot = 0;  // the block's parameter it sets (for kOmega: the sesinw slot)
  CubeRole role = CubeRole::kQuantile;
};

class ParameterBlock {
 public:
  ParameterBlock(BlockKind kind, std::string label);
  virtual ~ParameterBlock();
  ParameterBlock(const ParameterBlock&) = default;
  ParameterBlock& operator=(const ParameterBlock&) = default;
  virtual std::unique_ptr<ParameterBlock> clone() const = 0;

  BlockKind kind() const { return kind_; }
  const std::string& label() const { return label_; }  // "b", "north", "trend"
  std::size_t first() const { return first_; }         // theta index of its first parameter
  int size() const { return static_cast<int>(params_.size()); }
  std::size_t index(int slot) const { return first_ + static_cast<std::size_t>(slot); }
  const ParameterInfo& info(int slot) const { return params_.at(static_cast<std::size_t>(slot)); }
  double value(std::span<const double> theta, int slot) const { return theta[index(slot)]; }

  // ---- Priors ------------------------------------------------------------------------
  // Writes the block's default priors into `priors` (its 1-D entries; a planet also its
  // eccentricity prior).
  virtual void set_default_priors(const PriorContext& context, ModelPriors& priors) const = 0;
  // Throws InputError ("<where>: ...") when `prior` cannot be the prior of parameter
  // `slot` (e.g. a period prior reaching P <= 0).
  virtual void check_override(int slot, const Prior& prior, const std::string& where) const;
  // After overrides: ties between a block's priors (a planet's t_conj window follows its
  // period prior unless overridden itself).
  virtual void finish_priors(const PriorContext& context, const std::vector<std::string>& overridden,
                             ModelPriors& priors) const;
  // Parameters whose prior is not their 1-D entry but a joint one (a planet's
  // sqrt(e) cos w and sqrt(e) sin w); ParameterLayout::log_prior skips their 1-D entries.
  virtual bool joint_slot(int slot) const;
  // ln of the block's joint prior density (0 when it has none); -inf outside its support.
  virtual double joint_log_prior(std::span<const double> theta, const ModelPriors& priors) const;
  // What the joint prior is called in messages ("b.eccentricity"); "" without one.
  virtual std::string joint_name() const { return ""; }
  // One line per parameter, in order ("b.period_d  log-uniform(0.5, 4200)").
  virtual std::vector<std::string> describe_priors(const ModelPriors& priors) const;

  // ---- The MAP fit ---------------------------------------------------------------------
  // Bounds the optimiser keeps parameter `slot` in, for a run starting at theta.
  virtual std::pair<double, double> fit_bounds(int slot, std::span<const double> theta, const Prior& prior) const;
  // Initial step of the optimiser.
  virtual double fit_step(int slot, std::span<const double> theta, double baseline_days, double bound_width) const;
  // Value to start from when nothing better is known.
  virtual double fit_start(int slot, const Prior& prior) const;
  // Moves theta back inside what the model can evaluate (a planet's e below its limit)
  // and returns a penalty (>= 0) for the distance moved, so the optimiser sees no cliff.
  virtual double fit_regularise(std::span<double> theta, const ModelPriors& priors) const;
  // The joint part of the prior density the fit maximises, at parameters clamped into
  // the joint prior's support (ParameterLayout::fit_log_prior adds the 1-D parts).
  virtual double fit_joint_log_prior(std::span<const double> theta, const ModelPriors& priors) const;

  // ---- The ensemble sampler -------------------------------------------------------------
  // Half-width of the starting ball around the MAP, small against any posterior width.
  virtual double ball_scale(int slot, std::span<const double> theta) const;

  // ---- Nested sampling --------------------------------------------------------------------
  // The cube coordinates of the block's free parameters, in order. `skip[slot]` marks
  // parameters drawn elsewhere (fixed, or integrated out analytically).
  virtual std::vector<CubeCoordinate> cube_coordinates(const ModelPriors& priors, bool phase_conjunction,
                                                       const std::vector<bool>& skip) const;
  // Writes the block's parameters from the values of its coordinates (same order).
  virtual void from_cube(std::span<const double> u, std::span<const CubeCoordinate> coords,
                         const ModelPriors& priors, std::span<double> theta) const;
  // Exchanges the values of this block and `other` (same kind and size) in theta.
  void swap_values(std::span<double> theta, const ParameterBlock& other) const;

 protected:
  std::vector<ParameterInfo> params_;
  const Prior& prior_of(const ModelPriors& priors, int slot) const;
  // [lo, hi] made finite where the prior is open (normal: 20 sd; half-normal: 8 sd).
  static std::pair<double, double> finite_bounds(const Prior& prior, double lo, double hi);

 private:
  friend class ParameterLayout;
  BlockKind kind_;
  std::string label_;
  std::size_t first_ = 0;
};

// A block with an orbital period and a time of conjunction (planets, transit-only
// ephemerides): what transit times, period ordering and nested sampling's period
// windows and mode jumps work with.
class OrbitBlock : public ParameterBlock {
 public:
  using ParameterBlock::ParameterBlock;
  virtual int period_slot() const = 0;
  virtual int t_conj_slot() const = 0;
  // The slot of the signal's amplitude (K), -1 when it has none.
  virtual int amplitude_slot() const { return -1; }
  // The letter's position: b = 0, c = 1, ...
  int letter() const;
  double period(std::span<const double> theta) const { return value(theta, period_slot()); }
  double t_conj(std::span<const double> theta) const { return value(theta, t_conj_slot()); }
};

// One Keplerian orbit: period, K, sqrt(e) cos w, sqrt(e) sin w, time of conjunction.
class PlanetBlock final : public OrbitBlock {
 public:
  enum Slot : int { kPeriod = 0, kAmplitude = 1, kSecosw = 2, kSesinw = 3, kTConj = 4, kSize = 5 };
  explicit PlanetBlock(std::string label);
  std::unique_ptr<ParameterBlock> clone() const override { return std::make_unique<PlanetBlock>(*this); }
  int period_slot() const override { return kPeriod; }
  int t_conj_slot() const override { return kTConj; }
  int amplitude_slot() const override { return kAmplitude; }

  Planet planet(std::span<const double> theta) const;
  void put(std::span<double> theta, const Planet& planet) const;
  const EccentricityPrior& eccentricity_prior(const ModelPriors& priors) const;
  // Prior probability that the orbit keeps its periastron outside the star (1 without a
  // limit): the integral over the period prior of P(e < e_max(P)) under the eccentricity
  // prior (adaptive Gauss-Kronrod quadrature, Boost.Math).
  double periastron_allowed_fraction(const ModelPriors& priors) const;
  bool periastron_allowed(std::span<const double> theta, const ModelPriors& priors) const;

  void set_default_priors(const PriorContext& context, ModelPriors& priors) const override;
  void check_override(int slot, const Prior& prior, const std::string& where) const override;
  void finish_priors(const PriorContext& context, const std::vector<std::string>& overridden,
                     ModelPriors& priors) const override;
  bool joint_slot(int slot) const override { return slot == kSecosw || slot == kSesinw; }
  double joint_log_prior(std::span<const double> theta, const ModelPriors& priors) const override;
  std::string joint_name() const override { return label() + ".eccentricity"; }
  std::vector<std::string> describe_priors(const ModelPriors& priors) const override;
  std::pair<double, double> fit_bounds(int slot, std::span<const double> theta, const Prior& prior) const override;
  double fit_step(int slot, std::span<const double> theta, double baseline_days, double bound_width) const override;
  double fit_regularise(std::span<double> theta, const ModelPriors& priors) const override;
  double fit_joint_log_prior(std::span<const double> theta, const ModelPriors& priors) const override;
  double ball_scale(int slot, std::span<const double> theta) const override;
  std::vector<CubeCoordinate> cube_coordinates(const ModelPriors& priors, bool phase_conjunction,
                                               const std::vector<bool>& skip) const override;
  void from_cube(std::span<const double> u, std::span<const CubeCoordinate> coords, const ModelPriors& priors,
                 std::span<double> theta) const override;

 private:
  // The eccentricity the model may evaluate at this period (prior limit, periastron).
  double max_eccentricity(double period_days, const ModelPriors& priors) const;
};

// An instrument's zero point (linear) and, when fitted, its jitter.
class InstrumentBlock final : public ParameterBlock {
 public:
  enum Slot : int { kOffset = 0, kJitter = 1 };
  InstrumentBlock(std::string name, int instrument, bool fit_jitter);
  std::unique_ptr<ParameterBlock> clone() const override { return std::make_unique<InstrumentBlock>(*this); }
  int instrument() const { return instrument_; }  // index into VelocityData::instrument_names
  bool has_jitter() const { return size() > kJitter; }
  double offset(std::span<const double> theta) const { return value(theta, kOffset); }
  double jitter(std::span<const double> theta) const { return has_jitter() ? value(theta, kJitter) : 0.0; }
  std::size_t offset_index() const { return index(kOffset); }
  std::size_t jitter_index() const { return index(kJitter); }

  void set_default_priors(const PriorContext& context, ModelPriors& priors) const override;
  void check_override(int slot, const Prior& prior, const std::string& where) const override;
  double fit_start(int slot, const Prior& prior) const override;

 private:
  int instrument_;
};

// A polynomial trend c1 (t - t_ref) [+ c2 (t - t_ref)^2], both linear.
class TrendBlock final : public ParameterBlock {
 public:
  explicit TrendBlock(int order);
  std::unique_ptr<ParameterBlock> clone() const override { return std::make_unique<TrendBlock>(*this); }
  int order() const { return size(); }
  double coefficient(std::span<const double> theta, int power) const { return value(theta, power - 1); }
  std::size_t coefficient_index(int power) const { return index(power - 1); }
  // c1 t + c2 t^2 at time t (days after the reference epoch).
  double at(std::span<const double> theta, double t_days) const;

  void set_default_priors(const PriorContext& context, ModelPriors& priors) const override;
};

// Extra scatter (days) of one planet's transit times, added in quadrature.
class TransitJitterBlock final : public ParameterBlock {
 public:
  explicit TransitJitterBlock(std::string planet_label);
  std::unique_ptr<ParameterBlock> clone() const override { return std::make_unique<TransitJitterBlock>(*this); }
  double jitter(std::span<const double> theta) const { return value(theta, 0); }

  void set_default_priors(const PriorContext& context, ModelPriors& priors) const override;
  void check_override(int slot, const Prior& prior, const std::string& where) const override;
  double fit_step(int slot, std::span<const double> theta, double baseline_days, double bound_width) const override;
  double ball_scale(int slot, std::span<const double> theta) const override;
};

// Period and time of conjunction of a transiting body whose velocity signal the model
// leaves out (its transit times still need explaining). Priors are given, not defaulted.
class TransitEphemerisBlock final : public OrbitBlock {
 public:
  enum Slot : int { kPeriod = 0, kTConj = 1 };
  explicit TransitEphemerisBlock(std::string label);
  std::unique_ptr<ParameterBlock> clone() const override { return std::make_unique<TransitEphemerisBlock>(*this); }
  int period_slot() const override { return kPeriod; }
  int t_conj_slot() const override { return kTConj; }

  void set_default_priors(const PriorContext& context, ModelPriors& priors) const override;
  std::vector<CubeCoordinate> cube_coordinates(const ModelPriors& priors, bool phase_conjunction,
                                               const std::vector<bool>& skip) const override;
  void from_cube(std::span<const double> u, std::span<const CubeCoordinate> coords, const ModelPriors& priors,
                 std::span<double> theta) const override;
};

// The hyperparameters of the Gaussian-process noise (gp_kernels.h: the kernel's parameter
// list, named gp.<name>, e.g. gp.rotation_period_d), and with per-instrument amplitudes
// one amplitude ratio per instrument after the first (gp.scale_<instrument>; the first
// instrument's is 1). Default priors in model_priors.h.
class GpBlock final : public ParameterBlock {
 public:
  GpBlock(gp::KernelKind kernel, const std::vector<std::string>& instrument_names, bool per_instrument_amplitude);
  std::unique_ptr<ParameterBlock> clone() const override { return std::make_unique<GpBlock>(*this); }
  gp::KernelKind kernel() const { return kernel_; }
  int n_kernel_parameters() const { return n_kernel_; }
  // The kernel's parameters (gp_kernels.h to_vector order) at theta.
  std::span<const double> kernel_values(std::span<const double> theta) const {
    return theta.subspan(first(), static_cast<std::size_t>(n_kernel_));
  }
  // GP amplitude of instrument i relative to the first (1 without per-instrument amplitudes).
  double scale(std::span<const double> theta, int instrument) const;
  bool per_instrument() const { return !scale_slot_.empty(); }

  void set_default_priors(const PriorContext& context, ModelPriors& priors) const override;
  void check_override(int slot, const Prior& prior, const std::string& where) const override;
  double fit_start(int slot, const Prior& prior) const override;
  // A rotation or period prior that lies wholly beyond the data's baseline is an input error.
  void finish_priors(const PriorContext& context, const std::vector<std::string>& overridden,
                     ModelPriors& priors) const override;
  double fit_step(int slot, std::span<const double> theta, double baseline_days, double bound_width) const override;

 private:
  gp::KernelKind kernel_;
  int n_kernel_ = 0;
  std::vector<int> scale_slot_;  // by instrument index; -1 for the first (scale 1)
};

// The ordered blocks of one model.
class ParameterLayout {
 public:
  ParameterLayout() = default;
  ParameterLayout(const ParameterLayout& other);
  ParameterLayout& operator=(const ParameterLayout& other);
  ParameterLayout(ParameterLayout&&) noexcept = default;
  ParameterLayout& operator=(ParameterLayout&&) noexcept = default;

  // The blocks of a configuration: planets b, c, ... (ModelLayout::n_planets), one
  // instrument block per name, the trend, transit-time jitters.
  static ParameterLayout from(const ModelLayout& layout, const std::vector<std::string>& instrument_names);
  // Appends a block (its parameters after the current ones).
  void add(std::unique_ptr<ParameterBlock> block);

  std::size_t n_params() const { return n_params_; }
  const std::vector<std::unique_ptr<ParameterBlock>>& blocks() const& { return blocks_; }
  const std::vector<std::unique_ptr<ParameterBlock>>& blocks() && = delete;
  std::vector<std::string> names() const;
  std::vector<std::string> units() const;
  // The block owning theta index i.
  const ParameterBlock& block_at(std::size_t i) const&;
  const ParameterBlock& block_at(std::size_t i) && = delete;
  // Index of a parameter by name; npos when absent.
  std::size_t find(const std::string& name) const;
  static constexpr std::size_t npos = static_cast<std::size_t>(-1);

  // Typed views, in theta order. They point into this layout, so they are not offered
  // on a temporary (keep the layout in a variable).
  std::vector<const PlanetBlock*> planets() const&;
  std::vector<const InstrumentBlock*> instruments() const&;  // by instrument index
  std::vector<const OrbitBlock*> orbits() const&;             // planets (Keplerian, N-body) and transit-only ephemerides
  const TrendBlock* trend() const&;
  const TransitJitterBlock* transit_jitter(const std::string& planet_label) const&;
  const OrbitBlock* orbit(const std::string& label) const&;
  const GpBlock* gaussian_process() const&;
  const PlanetBlock& planet(int position) const&;  // position among the planet blocks
  std::vector<const PlanetBlock*> planets() && = delete;
  std::vector<const InstrumentBlock*> instruments() && = delete;
  std::vector<const OrbitBlock*> orbits() && = delete;
  const TrendBlock* trend() && = delete;
  const TransitJitterBlock* transit_jitter(const std::string&) && = delete;
  const OrbitBlock* orbit(const std::string&) && = delete;
  const GpBlock* gaussian_process() && = delete;
  const PlanetBlock& planet(int) && = delete;

  // Sum of the blocks' log priors plus the period ordering of the planets whose letter is
  // not fixed by data (P_b < P_c < ... among them, ModelPriors::order_periods).
  double log_prior(std::span<const double> theta, const ModelPriors& priors) const;
  // The planet (position among planet blocks) that breaks the period ordering, -1 if none.
  int first_unordered_planet(std::span<const double> theta, const ModelPriors& priors) const;
  // "" inside the support, else the name of the first offending parameter.
  std::string outside_support(std::span<const double> theta, const ModelPriors& priors) const;
  // One line per parameter in theta order (HDF5 /parameters/priors, reports).
  std::vector<std::string> describe_priors(const ModelPriors& priors) const;
  // Notes on the whole prior (ordering, periastron limit), for reports and attributes.
  std::vector<std::string> prior_notes(const ModelPriors& priors) const;

  // For the MAP fit: the prior density at theta with each 1-D prior's argument clamped
  // into its support and the joint priors at their clamped values (no ordering), and
  // the blocks' regularisation (ParameterBlock::fit_regularise), summed.
  double fit_log_prior(std::span<const double> theta, const ModelPriors& priors) const;
  double fit_regularise(std::span<double> theta, const ModelPriors& priors) const;

 private:
  std::vector<std::unique_ptr<ParameterBlock>> blocks_;
  std::size_t n_params_ = 0;
};

// Copies the values of the parameters `to` shares with `from` (same names); others keep
// their value in `to_theta`.
void transfer_parameters(const ParameterLayout& from, std::span<const double> from_theta,
                         const ParameterLayout& to, std::span<double> to_theta);
// The priors of `to` taken from `from_priors` by parameter name (planets' eccentricity
// priors stay by letter). Every parameter of `to` must exist in `from` (std::logic_error).
ModelPriors restrict_priors(const ParameterLayout& from, const ModelPriors& from_priors, const ParameterLayout& to);

}  // namespace apsides
