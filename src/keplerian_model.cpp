#include "apsides/keplerian_model.h"

#include <fmt/format.h>

#include <cassert>
#include <cmath>
#include <limits>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/kepler.h"
#include "kernels/kernels.h"

namespace apsides {
using constants::kPi;
using constants::kTwoPi;

double Planet::ecc() const {
  return sqrt_e_cos_omega * sqrt_e_cos_omega + sqrt_e_sin_omega * sqrt_e_sin_omega;
}

double Planet::omega_rad() const {
  if (sqrt_e_cos_omega == 0.0 && sqrt_e_sin_omega == 0.0) return 0.0;
  return std::atan2(sqrt_e_sin_omega, sqrt_e_cos_omega);
}

Planet Planet::from_elements(double period_days, double semi_amplitude_m_s, double ecc,
                             double omega_rad, double t_conj_days) {
  Planet p;
  p.period_days = period_days;
  p.semi_amplitude_m_s = semi_amplitude_m_s;
  const double se = std::sqrt(ecc);
  p.sqrt_e_cos_omega = se * std::cos(omega_rad);
  p.sqrt_e_sin_omega = se * std::sin(omega_rad);
  p.t_conj_days = t_conj_days;
  return p;
}

double mean_anomaly_at_conjunction(double ecc, double omega_rad) {
  const double nu = 0.5 * kPi - omega_rad;
  const double E = eccentric_from_true_anomaly(nu, ecc);
  return E - ecc * std::sin(E);
}

double time_of_periastron(double period_days, double ecc, double omega_rad, double t_conj_days) {
  return t_conj_days - period_days / kTwoPi * mean_anomaly_at_conjunction(ecc, omega_rad);
}

double time_of_conjunction(double period_days, double ecc, double omega_rad, double t_peri_days) {
  return t_peri_days + period_days / kTwoPi * mean_anomaly_at_conjunction(ecc, omega_rad);
}

double time_of_occultation(double period_days, double ecc, double omega_rad, double t_peri_days) {
  const double nu = 1.5 * kPi - omega_rad;
  const double E = eccentric_from_true_anomaly(nu, ecc);
  double M = E - ecc * std::sin(E);
  if (M < 0.0) M += kTwoPi;
  return t_peri_days + period_days / kTwoPi * M;
}

double mean_anomaly_at(const Planet& planet, double t_days) {
  const double e = planet.ecc();
  const double M0 = mean_anomaly_at_conjunction(e, planet.omega_rad());
  double M = std::fmod(kTwoPi * (t_days - planet.t_conj_days) / planet.period_days + M0, kTwoPi);
  if (M < 0.0) M += kTwoPi;
  return M;
}

double planet_velocity(const Planet& planet, double t_days) {
  const double e = planet.ecc();
  const double w = planet.omega_rad();
  const double E = solve_kepler(mean_anomaly_at(planet, t_days), e);
  const double nu = true_anomaly_from_eccentric(E, e);
  return planet.semi_amplitude_m_s * (std::cos(nu + w) + e * std::cos(w));
}

std::string to_string(Trend trend) {
  switch (trend) {
    case Trend::kNone: return "none";
    case Trend::kLinear: return "linear";
    case Trend::kQuadratic: return "quadratic";
  }
  return "none";
}

Trend parse_trend(const std::string& text, const std::string& where) {
  if (text == "none") return Trend::kNone;
  if (text == "linear") return Trend::kLinear;
  if (text == "quadratic") return Trend::kQuadratic;
  throw InputError(fmt::format("{}: trend is '{}'; it must be \"none\", \"linear\" or \"quadratic\"",
                               where, text));
}

std::string to_string(NoiseKind kind) { return kind == NoiseKind::kWhite ? "white" : "gp"; }

NoiseKind parse_noise_kind(const std::string& text, const std::string& where) {
  if (text == "white") return NoiseKind::kWhite;
  if (text == "gp") return NoiseKind::kGaussianProcess;
  throw InputError(fmt::format("{}: noise kind is '{}'; it must be \"white\" or \"gp\"", where, text));
}

std::size_t ModelLayout::n_params() const { return ParameterLayout::from(*this, {}).n_params(); }

std::size_t ModelLayout::planet_index(int planet) const {
  const ParameterLayout p = ParameterLayout::from(*this, {});
  return p.planet(planet).index(PlanetBlock::kPeriod);
}
std::size_t ModelLayout::offset_index(int instrument) const {
  const ParameterLayout p = ParameterLayout::from(*this, {});
  return p.instruments().at(static_cast<std::size_t>(instrument))->offset_index();
}
std::size_t ModelLayout::jitter_index(int instrument) const {
  assert(fit_jitter);
  const ParameterLayout p = ParameterLayout::from(*this, {});
  return p.instruments().at(static_cast<std::size_t>(instrument))->jitter_index();
}
std::size_t ModelLayout::trend_index(int power) const {
  assert(power >= 1 && power <= trend_order());
  const ParameterLayout p = ParameterLayout::from(*this, {});
  return p.trend()->coefficient_index(power);
}
long ModelLayout::transit_jitter_index(int planet) const {
  const ParameterLayout p = ParameterLayout::from(*this, {});
  const TransitJitterBlock* b = p.transit_jitter(planet_label(planet));
  return b != nullptr ? static_cast<long>(b->index(0)) : -1;
}

std::string planet_label(int index) {
  return std::string(1, static_cast<char>('b' + index));
}

std::vector<std::string> ModelLayout::names(const std::vector<std::string>& instrument_names) const {
  return ParameterLayout::from(*this, instrument_names).names();
}

std::vector<std::string> ModelLayout::units() const { return ParameterLayout::from(*this, {}).units(); }

Planet planet_from(std::span<const double> theta, const ModelLayout& layout, int planet) {
  const ParameterLayout p = ParameterLayout::from(layout, {});
  return p.planet(planet).planet(theta);
}

void put_planet(std::span<double> theta, const ModelLayout& layout, int planet, const Planet& p) {
  const ParameterLayout blocks = ParameterLayout::from(layout, {});
  blocks.planet(planet).put(theta, p);
}

struct KeplerianModel::Blocks {
  ParameterLayout parameters;
  std::vector<const PlanetBlock*> planets;
  std::vector<const InstrumentBlock*> instruments;  // by instrument index
  const TrendBlock* trend = nullptr;
  explicit Blocks(ParameterLayout p)
      : parameters(std::move(p)), planets(parameters.planets()), instruments(parameters.instruments()),
        trend(parameters.trend()) {}
  double c1(std::span<const double> theta) const {
    return trend != nullptr && trend->order() >= 1 ? trend->coefficient(theta, 1) : 0.0;
  }
  double c2(std::span<const double> theta) const {
    return trend != nullptr && trend->order() >= 2 ? trend->coefficient(theta, 2) : 0.0;
  }
};

namespace {
// The configuration a layout of blocks corresponds to (for KeplerianModel::layout()).
ModelLayout layout_of(const ParameterLayout& p) {
  ModelLayout L;
  L.n_planets = static_cast<int>(p.planets().size());
  L.n_instruments = static_cast<int>(p.instruments().size());
  L.fit_jitter = !p.instruments().empty() && p.instruments().front()->has_jitter();
  L.trend = p.trend() == nullptr ? Trend::kNone : static_cast<Trend>(p.trend()->order());
  for (const auto& b : p.blocks())
    if (b->kind() == BlockKind::kTransitJitter) L.transit_jitter_planets.push_back(b->label()[0] - 'b');
  if (const GpBlock* g = p.gaussian_process()) {
    L.noise.kind = NoiseKind::kGaussianProcess;
    L.noise.kernel = g->kernel();
    L.noise.per_instrument_amplitude = g->per_instrument();
  }
  return L;
}
}  // namespace

KeplerianModel::KeplerianModel(VelocityData data, ModelLayout layout)
    : KeplerianModel(data, ParameterLayout::from(layout, data.instrument_names)) {}

KeplerianModel::KeplerianModel(VelocityData data, ParameterLayout parameters)
    : data_(std::move(data)), layout_(layout_of(parameters)), blocks_(std::make_unique<Blocks>(std::move(parameters))) {
  assert(static_cast<std::size_t>(layout_.n_instruments) == data_.n_instruments());
  // The likelihood is a sum over points, so it may visit them grouped by instrument:
  // each block then has one offset and one jitter, and the kernel sees contiguous arrays.
  const std::size_t n = data_.size();
  block_time_days_.reserve(n);
  block_velocity_m_s_.reserve(n);
  block_variance_m2_s2_.reserve(n);
  block_start_.assign(1, 0);
  for (int k = 0; k < layout_.n_instruments; ++k) {
    for (std::size_t i = 0; i < n; ++i) {
      if (data_.instrument[i] != k) continue;
      block_time_days_.push_back(data_.time_days[i]);
      block_velocity_m_s_.push_back(data_.velocity_m_s[i]);
      block_variance_m2_s2_.push_back(data_.uncertainty_m_s[i] * data_.uncertainty_m_s[i]);
    }
    block_start_.push_back(block_time_days_.size());
  }
}

KeplerianModel::~KeplerianModel() = default;
KeplerianModel::KeplerianModel(KeplerianModel&&) noexcept = default;
KeplerianModel::KeplerianModel(const KeplerianModel& o)
    : data_(o.data_), layout_(o.layout_), blocks_(std::make_unique<Blocks>(o.blocks_->parameters)),
      block_time_days_(o.block_time_days_), block_velocity_m_s_(o.block_velocity_m_s_),
      block_variance_m2_s2_(o.block_variance_m2_s2_), block_start_(o.block_start_) {}

const ParameterLayout& KeplerianModel::parameters() const { return blocks_->parameters; }

namespace {
constexpr double kNegInf = -std::numeric_limits<double>::infinity();
constexpr double kLn2Pi = 1.83787706640934548356;  // ln(2 pi)

bool physical(std::span<const double> theta, const std::vector<const PlanetBlock*>& planets,
              const std::vector<const InstrumentBlock*>& instruments) {
  for (const PlanetBlock* b : planets) {
    const Planet p = b->planet(theta);
    if (!(p.period_days > 0.0) || !(p.ecc() < 1.0) || !std::isfinite(p.semi_amplitude_m_s) ||
        !std::isfinite(p.t_conj_days))
      return false;
  }
  for (const InstrumentBlock* b : instruments)
    if (b->has_jitter() && !(b->jitter(theta) >= 0.0)) return false;
  for (double v : theta)
    if (!std::isfinite(v)) return false;
  return true;
}

// Per-thread scratch of the fast likelihood, so concurrent const calls never share it.
thread_local std::vector<double> tl_scratch;

kernels::KeplerTerm kepler_term(const Planet& p) {
  const double e = p.ecc(), w = p.omega_rad();
  kernels::KeplerTerm term;
  term.mean_motion_rad_per_day = kTwoPi / p.period_days;
  term.mean_anomaly_at_zero =
      mean_anomaly_at_conjunction(e, w) - kTwoPi * p.t_conj_days / p.period_days;
  term.semi_amplitude_m_s = p.semi_amplitude_m_s;
  term.ecc = e;
  term.omega_rad = w;
  return term;
}

constexpr int kMaxStackPlanets = 16;
}  // namespace

void KeplerianModel::planets_velocity(std::span<const double> theta, std::span<const double> t,
                                      std::span<double> out) const {
  std::fill(out.begin(), out.end(), 0.0);
  std::vector<kernels::KeplerTerm> terms;
  for (const PlanetBlock* b : blocks_->planets) terms.push_back(kepler_term(b->planet(theta)));
  kernels::add_keplerians(t.data(), t.size(), terms.data(), static_cast<int>(terms.size()), out.data());
}

std::vector<double> KeplerianModel::predict(std::span<const double> theta) const {
  const std::size_t n = data_.size();
  std::vector<double> out(n);
  planets_velocity(theta, data_.time_days, out);
  const double c1 = blocks_->c1(theta), c2 = blocks_->c2(theta);
  const int order = blocks_->trend != nullptr ? blocks_->trend->order() : 0;
  for (std::size_t i = 0; i < n; ++i) {
    out[i] += blocks_->instruments[static_cast<std::size_t>(data_.instrument[i])]->offset(theta);
    const double t = data_.time_days[i];
    if (order >= 1) out[i] += c1 * t;
    if (order >= 2) out[i] += c2 * t * t;
  }
  return out;
}

std::vector<double> KeplerianModel::residuals(std::span<const double> theta) const {
  std::vector<double> m = predict(theta);
  for (std::size_t i = 0; i < m.size(); ++i) m[i] = data_.velocity_m_s[i] - m[i];
  return m;
}

std::vector<double> KeplerianModel::variances(std::span<const double> theta) const {
  std::vector<double> v(data_.size());
  for (std::size_t i = 0; i < v.size(); ++i) {
    const double j = blocks_->instruments[static_cast<std::size_t>(data_.instrument[i])]->jitter(theta);
    v[i] = data_.uncertainty_m_s[i] * data_.uncertainty_m_s[i] + j * j;
  }
  return v;
}

double KeplerianModel::chi_square(std::span<const double> theta) const {
  std::vector<double> r = residuals(theta);
  double chi2 = 0.0;
  for (std::size_t i = 0; i < r.size(); ++i) {
    double var = data_.uncertainty_m_s[i] * data_.uncertainty_m_s[i];
    if (layout_.fit_jitter) {
      const double j = blocks_->instruments[static_cast<std::size_t>(data_.instrument[i])]->jitter(theta);
      var += j * j;
    }
    chi2 += r[i] * r[i] / var;
  }
  return chi2;
}

namespace {
// ln [Phi(zb) - Phi(za)] for za <= zb, from the tail that keeps the digits.
double ln_normal_mass(double za, double zb) {
  const double r = 1.0 / std::sqrt(2.0);
  double m;
  if (za >= 0.0) m = 0.5 * (std::erfc(za * r) - std::erfc(zb * r));
  else if (zb <= 0.0) m = 0.5 * (std::erfc(-zb * r) - std::erfc(-za * r));
  else m = 1.0 - 0.5 * std::erfc(-za * r) - 0.5 * std::erfc(zb * r);
  return m > 0.0 ? std::log(m) : kNegInf;
}
}  // namespace

double KeplerianModel::log_likelihood(std::span<const double> theta) const {
  return log_likelihood_offsets_integrated(theta, {}, nullptr);
}

double KeplerianModel::log_likelihood_offsets_integrated(std::span<const double> theta,
                                                         std::span<const IntegratedOffset> integrated,
                                                         std::vector<OffsetConditional>* conditionals) const {
  assert(theta.size() == blocks_->parameters.n_params());
  if (conditionals != nullptr) conditionals->clear();
  if (!physical(theta, blocks_->planets, blocks_->instruments)) return kNegInf;
  // Planet terms on the stack for the usual handful of planets, on the heap beyond.
  const int n_planets = static_cast<int>(blocks_->planets.size());
  kernels::KeplerTerm stack_terms[kMaxStackPlanets];
  std::vector<kernels::KeplerTerm> heap_terms;
  kernels::KeplerTerm* terms = stack_terms;
  if (n_planets > kMaxStackPlanets) {
    heap_terms.resize(static_cast<std::size_t>(n_planets));
    terms = heap_terms.data();
  }
  for (int k = 0; k < n_planets; ++k) terms[k] = kepler_term(blocks_->planets[static_cast<std::size_t>(k)]->planet(theta));
  const double c1 = blocks_->c1(theta);
  const double c2 = blocks_->c2(theta);

  std::vector<double>& scratch = tl_scratch;
  if (scratch.size() < data_.size()) scratch.resize(data_.size());
  double lnl = 0.0;
  for (int i = 0; i < layout_.n_instruments; ++i) {
    const std::size_t b = block_start_[static_cast<std::size_t>(i)];
    const std::size_t n = block_start_[static_cast<std::size_t>(i) + 1] - b;
    const InstrumentBlock& inst = *blocks_->instruments[static_cast<std::size_t>(i)];
    const double jitter = inst.jitter(theta);
    const IntegratedOffset* io = nullptr;
    for (const auto& x : integrated)
      if (x.instrument == i) io = &x;
    if (io == nullptr) {
      if (n == 0) continue;
      lnl += kernels::block_lnlike(block_time_days_.data() + b, block_velocity_m_s_.data() + b,
                                   block_variance_m2_s2_.data() + b, n, terms, n_planets,
                                   inst.offset(theta), jitter * jitter, c1, c2, scratch.data());
      continue;
    }
    const double width = io->upper_m_s - io->lower_m_s;
    if (n == 0) {  // no data: the offset keeps its prior
      if (conditionals != nullptr)
        conditionals->push_back({0.5 * (io->lower_m_s + io->upper_m_s), width, io->lower_m_s, io->upper_m_s});
      continue;
    }
    const kernels::OffsetFreeFit f =
        kernels::block_offset_fit(block_time_days_.data() + b, block_velocity_m_s_.data() + b,
                                  block_variance_m2_s2_.data() + b, n, terms, n_planets, jitter * jitter,
                                  c1, c2, scratch.data());
    const double sd = 1.0 / std::sqrt(f.sum_inverse_variance);
    lnl += -0.5 * (f.chi2_min + f.log_det + static_cast<double>(n - 1) * kLn2Pi) + std::log(sd) +
           ln_normal_mass((io->lower_m_s - f.offset) / sd, (io->upper_m_s - f.offset) / sd) - std::log(width);
    if (conditionals != nullptr) conditionals->push_back({f.offset, sd, io->lower_m_s, io->upper_m_s});
  }
  return std::isnan(lnl) ? kNegInf : lnl;
}

double KeplerianModel::log_likelihood_reference(std::span<const double> theta) const {
  if (!physical(theta, blocks_->planets, blocks_->instruments)) return kNegInf;
  double lnl = 0.0;
  const int order = blocks_->trend != nullptr ? blocks_->trend->order() : 0;
  for (std::size_t i = 0; i < data_.size(); ++i) {
    const double t = data_.time_days[i];
    const InstrumentBlock& inst = *blocks_->instruments[static_cast<std::size_t>(data_.instrument[i])];
    double m = inst.offset(theta);
    if (order >= 1) m += blocks_->c1(theta) * t;
    if (order >= 2) m += blocks_->c2(theta) * t * t;
    for (const PlanetBlock* b : blocks_->planets) m += planet_velocity(b->planet(theta), t);
    const double r = data_.velocity_m_s[i] - m;
    double var = data_.uncertainty_m_s[i] * data_.uncertainty_m_s[i];
    if (inst.has_jitter()) {
      const double j = inst.jitter(theta);
      var += j * j;
    }
    lnl += -0.5 * (r * r / var + std::log(kTwoPi * var));
  }
  return lnl;
}

}  // namespace apsides
