// The N-body problem of a project, its posterior, and its MAP fit (nbody_model.h).
#include <fmt/format.h>

#include <Eigen/Dense>

#include <algorithm>
#include <cmath>
#include <limits>
#include <map>
#include <nlopt.hpp>
#include <set>

#include "apsides/error.h"
#include "apsides/nbody_model.h"
#include "apsides/orbit.h"
#include "apsides/project.h"
#include "model/prior_context.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kTenYears = 3652.5;

struct LinearEphemeris {
  double period = 0.0, t0 = 0.0;  // T_n = t0 + n P (frame days)
};

// Weighted least squares of T_n = t0 + n P.
LinearEphemeris linear_ephemeris(const std::vector<long long>& epochs, const std::vector<double>& t,
                                 const std::vector<double>& err) {
  double sw = 0, sx = 0, sy = 0, sxx = 0, sxy = 0;
  for (std::size_t i = 0; i < t.size(); ++i) {
    const double w = 1.0 / (err[i] * err[i]), x = static_cast<double>(epochs[i]);
    sw += w, sx += w * x, sy += w * t[i], sxx += w * x * x, sxy += w * x * t[i];
  }
  const double det = sw * sxx - sx * sx;
  LinearEphemeris e;
  e.period = (sw * sxy - sx * sy) / det;
  e.t0 = (sy - e.period * sx) / sw;
  return e;
}

int letter_of(const std::string& label) {
  return label.size() == 1 && label[0] >= 'b' && label[0] <= 'z' ? label[0] - 'b' : -1;
}

// Seeds every planet with transit times; checks each time against its linear ephemeris.
void seed_transiting(NbodyProblem& pb) {
  const double dt = pb.transits.reference_epoch_bjd - pb.reference_epoch_bjd;
  for (NbodySeed& s : pb.seeds) {
    const TransitData td = pb.transits.for_planet(s.label);
    if (td.size() == 0) continue;
    if (td.size() < 2)
      throw InputError(fmt::format("{}: planet {} has one transit time; an N-body fit needs at least two",
                                   td.origin.at(0), s.label));
    std::vector<double> t(td.time_days);
    for (double& x : t) x += dt;
    const LinearEphemeris le = linear_ephemeris(td.epoch, t, td.uncertainty_days);
    if (!(le.period > 0.0))
      throw InputError(fmt::format("{}: the transit times of {} do not increase with epoch", td.origin.at(0), s.label));
    for (std::size_t i = 0; i < td.size(); ++i) {
      const double oc = t[i] - (le.t0 + le.period * static_cast<double>(td.epoch[i]));
      if (std::abs(oc) > le.period / 3.0)
        throw InputError(fmt::format(
            "{}: transit epoch {} of {} lies {:.3f} d from the linear ephemeris (P = {:.5f} d): no orbit reaches "
            "it as that epoch (epoch numbering wrong?)",
            td.origin[i], td.epoch[i], s.label, oc, le.period));
    }
    const double n = std::round((pb.osculating_epoch_days - le.t0) / le.period);
    s.transiting = true;
    s.period_days = le.period;
    s.t_conj_days = le.t0 + n * le.period;
  }
}

// One problem for the data, settings and overrides (both public entry points).
NbodyProblem build_problem(const VelocityData& v, const TransitData& tr, double star_mass, const NbodySettings& st,
                           const std::vector<PriorSpec>& overrides) {
  if (const std::string m = st.Validate(); !m.empty()) throw InputError(m);
  if (!(star_mass > 0.0) || !std::isfinite(star_mass))
    throw InputError("star.mass_msun: an N-body model needs the star's mass ([star] mass_msun > 0)");
  if (v.size() == 0 && tr.size() == 0) throw InputError("an N-body model needs velocities or transit times");
  NbodyProblem pb;
  pb.velocities = v;
  pb.transits = tr;
  pb.star_mass_msun = star_mass;
  pb.settings = st;
  pb.prior_overrides = overrides;
  pb.reference_epoch_bjd = v.size() > 0 ? v.reference_epoch_bjd : tr.reference_epoch_bjd;
  // Data span (BJD) for the osculating-epoch rule.
  double lo = kInf, hi = -kInf;
  for (double t : v.time_days) lo = std::min(lo, t + v.reference_epoch_bjd), hi = std::max(hi, t + v.reference_epoch_bjd);
  for (double t : tr.time_days) lo = std::min(lo, t + tr.reference_epoch_bjd), hi = std::max(hi, t + tr.reference_epoch_bjd);
  const double epoch = std::isnan(st.osculating_epoch_bjd) ? pb.reference_epoch_bjd : st.osculating_epoch_bjd;
  if (!(epoch >= lo - kTenYears && epoch <= hi + kTenYears))
    throw InputError(fmt::format("model.osculating_epoch = {}: must lie within the data ({:.1f} .. {:.1f}, BJD_TDB) "
                                 "+- 10 years",
                                 epoch, lo, hi));
  pb.osculating_epoch_days = epoch - pb.reference_epoch_bjd;
  int n = st.n_planets;
  for (std::size_t i = 0; i < tr.size(); ++i) {
    const int l = letter_of(tr.planet[i]);
    if (l < 0)
      throw InputError(fmt::format("{}: planet label '{}': an N-body model names planets b, c, d, ...", tr.origin[i],
                                   tr.planet[i]));
    if (st.n_planets > 0 && l >= st.n_planets)
      throw InputError(fmt::format("{}: planet {} has transit times but nbody.planets = {}", tr.origin[i],
                                   tr.planet[i], st.n_planets));
    n = std::max(n, l + 1);
  }
  if (n < 1) throw InputError("nbody.planets: an N-body model needs at least one planet");
  if (n > kMaxNbodyPlanets) throw InputError(fmt::format("nbody.planets = {}: at most {}", n, kMaxNbodyPlanets));
  for (int j = 0; j < n; ++j) pb.seeds.push_back({planet_label(j)});
  seed_transiting(pb);
  double p_min = kInf;
  for (const NbodySeed& s : pb.seeds)
    if (s.transiting) p_min = std::min(p_min, s.period_days);
  if (st.step_days > 0.0 && !(st.step_days < 0.5 * p_min))
    throw InputError(fmt::format("nbody.step_days = {}: must be below half the innermost period ({:.4f} d)",
                                 st.step_days, p_min));
  return pb;
}
}  // namespace

NbodyProblem nbody_problem(const VelocityData& v, const TransitData& tr, double star_mass, const NbodySettings& st,
                           const std::vector<PriorSpec>& overrides) {
  return build_problem(v, tr, star_mass, st, overrides);
}

NbodyProblem nbody_problem(const Project& project) {
  const TransitData tr = project.transits.empty() ? TransitData{} : project.load_transits();
  const VelocityData v = project.velocities.empty() ? VelocityData{} : project.load_velocities();
  NbodyProblem pb = build_problem(v, tr, project.star.mass_msun.value_or(0.0), project.nbody, project.priors);
  pb.fit_jitter = project.model.fit_jitter;
  return pb;
}

// ---- The posterior -------------------------------------------------------------------------

namespace {
void apply_overrides(const NbodyProblem& pb, const ParameterLayout& L, ModelPriors& mp) {
  for (const PriorSpec& spec : pb.prior_overrides) {
    const std::string where = spec.origin.empty() ? "priors." + spec.parameter : spec.origin + ": priors." + spec.parameter;
    if (spec.eccentricity)
      throw InputError(fmt::format("{}: an N-body model takes priors on <planet>.secosw and <planet>.sesinw, not "
                                   "an eccentricity prior",
                                   where));
    const std::size_t i = L.find(spec.parameter);
    if (i == ParameterLayout::npos) {
      std::string names;
      for (const std::string& n : L.names()) names += (names.empty() ? "" : ", ") + n;
      throw InputError(fmt::format("{}: the N-body model has no parameter '{}' (parameters: {})", where,
                                   spec.parameter, names));
    }
    const ParameterBlock& b = L.block_at(i);
    b.check_override(static_cast<int>(i - b.first()), spec.prior, where);
    mp.parameter[i] = spec.prior;
  }
}
}  // namespace

NbodyPosterior make_nbody_posterior(const NbodyProblem& pb) {
  ParameterLayout L;
  for (const NbodySeed& s : pb.seeds) L.add(std::make_unique<NbodyPlanetBlock>(s.label));
  for (std::size_t k = 0; k < pb.velocities.n_instruments(); ++k)
    L.add(std::make_unique<InstrumentBlock>(pb.velocities.instrument_names[k], static_cast<int>(k), pb.fit_jitter));
  ModelPriors mp;
  mp.parameter.resize(L.n_params());
  mp.order_periods = false;
  PriorContext ctx;
  if (pb.velocities.size() > 0) ctx.stats = data_stats(pb.velocities);
  for (const auto& b : L.blocks()) b->set_default_priors(ctx, mp);
  std::vector<double> start(L.n_params(), 0.0);
  const std::vector<const InstrumentBlock*> inst = L.instruments();
  for (const InstrumentBlock* b : inst) {
    start[b->offset_index()] = ctx.stats.inst.at(static_cast<std::size_t>(b->instrument())).mean;
    if (b->has_jitter()) start[b->jitter_index()] = ctx.stats.inst.at(static_cast<std::size_t>(b->instrument())).median_err;
  }
  std::size_t pos = 0;
  for (const auto& blk : L.blocks()) {
    if (blk->kind() != BlockKind::kNbodyPlanet) continue;
    const auto& b = static_cast<const NbodyPlanetBlock&>(*blk);
    const NbodySeed& s = pb.seeds.at(pos++);
    if (!(s.period_days > 0.0))
      throw InputError(fmt::format("{}.period_d: planet {} has no transit times and no seed period (give a prior on "
                                   "{}.period_d)",
                                   s.label, s.label, s.label));
    const double w = s.transiting ? 0.02 : 0.3;
    mp.parameter[b.index(NbodyPlanetBlock::kPeriod)] = Prior::uniform(s.period_days * (1 - w), s.period_days * (1 + w));
    const double tw = s.transiting ? 0.25 : 0.5;  // a non-transiting planet's phase is free
    mp.parameter[b.index(NbodyPlanetBlock::kTConj)] =
        Prior::uniform(s.t_conj_days - tw * s.period_days, s.t_conj_days + tw * s.period_days);
    const bool free_orientation = !pb.settings.coplanar && !s.transiting;
    mp.parameter[b.index(NbodyPlanetBlock::kInclination)] =
        free_orientation ? Prior::uniform(1.0, 179.0) : Prior::fixed(pb.settings.inclination_deg);
    mp.parameter[b.index(NbodyPlanetBlock::kNode)] = free_orientation ? Prior::uniform(-180.0, 180.0) : Prior::fixed(0.0);
    NbodyPlanet p;
    p.mass_ratio = s.mass_ratio;
    p.period_days = s.period_days;
    p.sqrt_e_cos_omega = s.secosw;
    p.sqrt_e_sin_omega = s.sesinw;
    p.t_conj_days = s.t_conj_days;
    p.inclination_rad = pb.settings.inclination_deg * 3.14159265358979323846 / 180.0;
    b.put(start, p);
  }
  apply_overrides(pb, L, mp);
  // Starts inside overridden priors: fixed values, else clamped into the support.
  for (std::size_t i = 0; i < start.size(); ++i) {
    const Prior& p = mp.parameter[i];
    if (p.kind == PriorKind::kFixed) start[i] = p.a;
    else if (!std::isfinite(p.log_density(start[i]))) start[i] = std::clamp(start[i], p.lower(), p.upper());
  }
  NbodyPosterior out{PosteriorModel(std::move(L), std::move(mp)), nullptr, std::move(start)};
  const ParameterLayout& layout = out.model.layout();
  auto signal = std::make_shared<const NbodySignal>(layout, pb);
  if (pb.velocities.size() > 0) out.model.add_term(std::make_unique<NbodyVelocityTerm>(pb.velocities, layout, *signal));
  const auto& planets = signal->planets();
  for (std::size_t p = 0; p < planets.size(); ++p) {
    const TransitData td = pb.transits.for_planet(planets[p]->label());
    if (td.size() == 0) continue;
    out.model.add_term(std::make_unique<NbodyTransitTimesTerm>(td, pb.reference_epoch_bjd, *planets[p],
                                                               static_cast<int>(p), *signal, nullptr));
  }
  out.signal = std::move(signal);
  return out;
}

// ---- Super-period seeds ----------------------------------------------------------------------

std::vector<double> super_period_perturber_periods(double P, double P_ttv, int j_max) {
  std::vector<double> out;
  if (!(P > 0.0) || !(P_ttv > 0.0)) return out;
  for (int j = 2; j <= j_max; ++j) {
    for (double sgn : {-1.0, 1.0}) {
      // Outer perturber: |j / P' - (j - 1) / P| = 1 / P_ttv.
      const double fo = (j - 1) / P + sgn / P_ttv;
      if (fo > 0.0 && j / fo > P) out.push_back(j / fo);
      // Inner perturber: |j / P - (j - 1) / P_in| = 1 / P_ttv.
      const double fi = j / P + sgn / P_ttv;
      if (fi > 0.0 && (j - 1) / fi < P && (j - 1) / fi > 0.2 * P) out.push_back((j - 1) / fi);
    }
  }
  std::sort(out.begin(), out.end());
  return out;
}

double ttv_period_days(const std::vector<long long>& epochs, const std::vector<double>& t,
                       const std::vector<double>& err, double period) {
  const std::size_t n = t.size();
  if (n < 6) return std::numeric_limits<double>::quiet_NaN();
  const LinearEphemeris le = linear_ephemeris(epochs, t, err);
  std::vector<double> r(n), w(n);
  double t_lo = kInf, t_hi = -kInf;
  for (std::size_t i = 0; i < n; ++i) {
    r[i] = t[i] - (le.t0 + le.period * static_cast<double>(epochs[i]));
    w[i] = 1.0 / (err[i] * err[i]);
    t_lo = std::min(t_lo, t[i]), t_hi = std::max(t_hi, t[i]);
  }
  const double base = t_hi - t_lo;
  const double f_lo = 1.0 / (4.0 * base), f_hi = 1.0 / (2.0 * period), df = 1.0 / (20.0 * base);
  double best_f = std::numeric_limits<double>::quiet_NaN(), best = -kInf;
  for (double f = f_lo; f <= f_hi; f += df) {
    // Weighted least squares of r on [1, cos, sin]: the chi-square reduction.
    Eigen::Matrix3d A = Eigen::Matrix3d::Zero();
    Eigen::Vector3d b = Eigen::Vector3d::Zero();
    for (std::size_t i = 0; i < n; ++i) {
      const double ph = 2.0 * 3.14159265358979323846 * f * t[i];
      const Eigen::Vector3d x(1.0, std::cos(ph), std::sin(ph));
      A += w[i] * x * x.transpose();
      b += w[i] * r[i] * x;
    }
    const double gain = b.dot(A.ldlt().solve(b));
    if (gain > best) best = gain, best_f = f;
  }
  return 1.0 / best_f;
}

}  // namespace apsides
