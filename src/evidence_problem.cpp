// The radial-velocity problem for nested sampling (evidence.h: make_rv_evidence_problem),
// built in steps on the composed model (posterior_model.h): transit-only ephemerides for
// the transiting bodies a model leaves out, cube coordinates from the blocks, the period
// ordering, the periastron limit, the repartitioned windows and the mode jumps.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <memory>
#include <random>

#include "apsides/constants.h"
#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "apsides/evidence.h"
#include "apsides/posterior_model.h"
#include "evidence_internal.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();

bool same_prior(const Prior& a, const Prior& b) {
  return a.kind == b.kind && a.a == b.a && a.b == b.b && a.c == b.c && a.d == b.d;
}
bool same_ecc_prior(const EccentricityPrior& a, const EccentricityPrior& b) {
  return a.kind == b.kind && a.a == b.a && a.b == b.b && a.max_ecc == b.max_ecc;
}

// Posterior repartitioning of some cube coordinates (see make_rv_evidence_problem): with
// probability alpha (the selector coordinate below alpha) they are drawn uniformly inside
// one window (a box: an interval per coordinate), chosen by weight; else from the prior.
struct Repartition {
  std::size_t selector_slot = 0;
  std::vector<std::size_t> slots;               // the coordinates it moves
  std::vector<std::vector<double>> lo, hi;      // per window, per coordinate
  std::vector<double> weight, cum_weight;       // per window; normalised, cumulative
  void add_window(std::vector<double> l, std::vector<double> h, double w) {
    lo.push_back(std::move(l));
    hi.push_back(std::move(h));
    weight.push_back(w);
  }
  void normalise() {
    double total = 0.0;
    for (double w : weight) total += w;
    double cum = 0.0;
    cum_weight.clear();
    for (double& w : weight) {
      w /= total;
      cum += w;
      cum_weight.push_back(cum);
    }
    cum_weight.back() = 1.0;
  }
  // Moves the coordinates of `u` in place (from the prior draw to pi~'s) and returns
  // ln(pi~ / pi) at the result.
  double apply(std::vector<double>& u, double alpha) const {
    const double s = u[selector_slot];
    if (s < alpha) {
      const double r = s / alpha;
      std::size_t m = 0;
      while (m + 1 < cum_weight.size() && r >= cum_weight[m]) ++m;
      for (std::size_t c = 0; c < slots.size(); ++c) u[slots[c]] = lo[m][c] + u[slots[c]] * (hi[m][c] - lo[m][c]);
    }
    double q = 1.0 - alpha;
    for (std::size_t m = 0; m < weight.size(); ++m) {
      double d = alpha * weight[m];
      for (std::size_t c = 0; c < slots.size() && d > 0.0; ++c) {
        const double y = u[slots[c]];
        d = (y >= lo[m][c] && y < hi[m][c]) ? d / (hi[m][c] - lo[m][c]) : 0.0;
      }
      q += d;
    }
    return std::log(q);
  }
};
constexpr double kRepartitionAlpha = 0.5;

// The prior's CDF at x, by bisection on its quantile (priors here are continuous and
// strictly increasing on their support).
double prior_cdf(const Prior& p, double x) {
  double lo = 0.0, hi = 1.0;
  for (int i = 0; i < 60; ++i) {
    const double mid = 0.5 * (lo + hi);
    if (p.quantile(mid) < x) lo = mid; else hi = mid;
  }
  return 0.5 * (lo + hi);
}

// A block's cube coordinates: a contiguous run starting at `first`.
struct BlockCoordinates {
  const ParameterBlock* block = nullptr;
  std::vector<CubeCoordinate> coords;
  std::size_t first = 0;
  // The cube coordinate of parameter `slot` with `role` (-1 when it has none).
  int coordinate(int slot, CubeRole role) const {
    for (std::size_t c = 0; c < coords.size(); ++c)
      if (coords[c].slot == slot && coords[c].role == role) return static_cast<int>(first + c);
    return -1;
  }
};

// What the transform and the likelihood need, shared by the closures.
struct Prepared {
  PosteriorModel posterior;
  std::size_t n_total = 0;                 // theta entries before the log-prior-ratio one
  std::vector<double> fixed;               // theta's start (fixed values)
  std::vector<BlockCoordinates> cube;      // blocks with coordinates, in theta order
  std::vector<Repartition> repartitions;
  std::vector<const PlanetBlock*> sorted;  // planets sorted by period in the transform
  std::vector<KeplerianModel::IntegratedOffset> integrated;
  bool constrain = false;                  // ordering imposed as a constraint
  bool periastron = false;                 // periastron limit active
  explicit Prepared(PosteriorModel p) : posterior(std::move(p)) {}
  const ParameterLayout& layout() const { return posterior.layout(); }
  const ModelPriors& priors() const { return posterior.priors(); }
};

// Step 1: the model's blocks plus, for each letter with transit times that the model has
// no planet for, a transit-only ephemeris with the priors that planet would have.
PosteriorModel compose(const KeplerianModel& model, const ModelPriors& priors, const EvidenceTransits* transits,
                       std::vector<std::string>& notes) {
  ParameterLayout layout = model.parameters();
  ModelPriors ext = priors;
  if (transits == nullptr || transits->times.size() == 0) return make_posterior(model.data(), std::move(layout), ext, {});
  const ParameterLayout wide = ParameterLayout::from(transits->wide_layout, model.data().instrument_names);
  for (int j = 0; j < 26; ++j) {
    const std::string label = planet_label(j);
    if (transits->times.for_planet(label).size() == 0 || layout.orbit(label) != nullptr) continue;
    const std::size_t ip = wide.find(label + ".period_d"), it = wide.find(label + ".t_conj_d");
    if (ip == ParameterLayout::npos || it == ParameterLayout::npos || transits->wide_priors.parameter.size() <= it)
      throw InputError(fmt::format("evidence: no priors for planet '{}' named by transit times", label));
    const Prior& pp = transits->wide_priors.parameter[ip];
    layout.add(std::make_unique<TransitEphemerisBlock>(label));
    ext.parameter.push_back(pp);
    ext.parameter.push_back(transits->wide_priors.parameter[it]);
    notes.push_back(fmt::format("{}.period_d  {} (transit times only: no velocity signal in this model)", label,
                                pp.describe()));
    notes.push_back(fmt::format("{}.t_conj_d  uniform over one period (phase prior)", label));
  }
  return make_posterior(model.data(), std::move(layout), std::move(ext), transits->times);
}

// One line per parameter for the report, in theta order ("b.K_ms  modified-Jeffreys(...)",
// "north.offset_ms  ... (integrated out analytically ...)", "c.t_conj_d  fixed at 3").
void coordinate_notes(const Prepared& s, std::vector<std::string>& notes) {
  const ModelPriors& priors = s.priors();
  for (const auto& b : s.layout().blocks()) {
    const BlockCoordinates* bc = nullptr;
    for (const auto& c : s.cube)
      if (c.block == b.get()) bc = &c;
    for (int k = 0; k < b->size(); ++k) {
      const std::string& name = b->info(k).name;
      const Prior& pr = priors.parameter[b->index(k)];
      if (pr.kind == PriorKind::kFixed && !b->joint_slot(k)) {
        notes.push_back(fmt::format("{}  fixed at {:g}", name, pr.a));
        continue;
      }
      const bool integrated = std::any_of(s.integrated.begin(), s.integrated.end(), [&](const auto& io) {
        return b->kind() == BlockKind::kInstrument && k == InstrumentBlock::kOffset &&
               static_cast<const InstrumentBlock&>(*b).instrument() == io.instrument;
      });
      if (integrated) {
        notes.push_back(fmt::format("{}  {} (integrated out analytically; samples drawn from its conditional posterior)",
                                    name, pr.describe()));
        continue;
      }
      for (const CubeCoordinate& c : bc ? bc->coords : std::vector<CubeCoordinate>{}) {
        if (c.slot != k) continue;
        if (c.role == CubeRole::kEccentricity)
          notes.push_back(fmt::format("{}  {}", b->joint_name(),
                                      static_cast<const PlanetBlock&>(*b).eccentricity_prior(priors).describe()));
        else if (c.role == CubeRole::kPhase)
          notes.push_back(fmt::format("{}  uniform over one period centred on {:g} d (phase prior; same evidence as {})",
                                      name, 0.5 * (pr.a + pr.b), pr.describe()));
        else if (c.role == CubeRole::kQuantile)
          notes.push_back(fmt::format("{}  {}", name, pr.describe()));
      }
    }
  }
}

// Step 2: fixed values, offsets integrated out analytically, and each block's cube
// coordinates (theta order). Something must be left to sample: with nothing else, the
// first offset stays a coordinate.
void assign_coordinates(Prepared& s, bool phase_conjunction, bool allow_integration, std::vector<std::string>& notes) {
  const ParameterLayout& L = s.layout();
  const ModelPriors& priors = s.priors();
  s.fixed.assign(L.n_params(), 0.0);
  std::vector<bool> skip(L.n_params(), false);
  s.integrated.clear();
  for (const auto& b : L.blocks())
    for (int k = 0; k < b->size(); ++k) {
      const Prior& pr = priors.parameter[b->index(k)];
      if (pr.kind == PriorKind::kFixed && !b->joint_slot(k)) {
        s.fixed[b->index(k)] = pr.a;
        skip[b->index(k)] = true;
      } else if (allow_integration && b->kind() == BlockKind::kInstrument && k == InstrumentBlock::kOffset &&
                 pr.kind == PriorKind::kUniform && pr.b > pr.a) {
        s.integrated.push_back({static_cast<const InstrumentBlock&>(*b).instrument(), pr.a, pr.b});
        skip[b->index(k)] = true;
      }
    }
  s.cube.clear();
  std::size_t n = 0;
  for (const auto& b : L.blocks()) {
    BlockCoordinates bc{b.get(), b->cube_coordinates(priors, phase_conjunction, skip), n};
    n += bc.coords.size();
    if (!bc.coords.empty()) s.cube.push_back(std::move(bc));
  }
  if (n == 0 && !s.integrated.empty()) return assign_coordinates(s, phase_conjunction, false, notes);
  coordinate_notes(s, notes);
}

// Planets named by transit times keep their letter; the others ("free") are ordered.
std::vector<const PlanetBlock*> free_planets(const Prepared& s) {
  std::vector<const PlanetBlock*> out;
  for (const PlanetBlock* p : s.layout().planets())
    if (!s.priors().is_label_fixed(p->letter())) out.push_back(p);
  return out;
}

// Monte Carlo estimate (fixed seed) of the prior probability that the free planets come
// out ordered by period and every orbit clears the star.
double ordered_fraction(const Prepared& s, const std::vector<const PlanetBlock*>& free) {
  const ModelPriors& priors = s.priors();
  auto rng = make_stream(0x5eedULL, 0x07dULL);
  std::uniform_real_distribution<double> unif(0.0, 1.0);
  constexpr int kDraws = 200000;
  int hits = 0;
  const auto planets = s.layout().planets();
  std::vector<double> per(planets.size());
  for (int n = 0; n < kDraws; ++n) {
    bool allowed = true;
    for (std::size_t j = 0; j < planets.size(); ++j) {
      per[j] = priors.parameter[planets[j]->index(PlanetBlock::kPeriod)].quantile(unif(rng));
      const double e = planets[j]->eccentricity_prior(priors).quantile_e(unif(rng));
      if (!priors.periastron_allowed(per[j], std::sqrt(e), 0.0)) allowed = false;
    }
    std::vector<double> ordered;
    for (std::size_t j = 0; j < planets.size(); ++j)
      if (std::find(free.begin(), free.end(), planets[j]) != free.end()) ordered.push_back(per[j]);
    if (allowed && std::is_sorted(ordered.begin(), ordered.end()) &&
        std::adjacent_find(ordered.begin(), ordered.end()) == ordered.end())
      ++hits;
  }
  if (hits == 0)
    throw InputError("priors: the planets' period priors leave no room for P_b < P_c < ...; check the "
                     "[priors] period ranges");
  return static_cast<double>(hits) / kDraws;
}

// Step 3: labelling by increasing period (see evidence.h). Exchangeable planets are
// sorted in the transform; otherwise the ordering is a constraint and ln Z is divided
// by its prior probability.
void ordering(Prepared& s, RvEvidenceProblem& out) {
  const ModelPriors& priors = s.priors();
  const std::vector<const PlanetBlock*> free = free_planets(s);
  const int n_free = static_cast<int>(free.size());
  const int k = static_cast<int>(s.layout().planets().size());
  bool exchangeable = true;
  for (int f = 1; f < n_free; ++f) {
    for (int q = 0; q < PlanetBlock::kSize; ++q)
      if (!same_prior(priors.parameter[free[static_cast<std::size_t>(f)]->index(q)], priors.parameter[free[0]->index(q)]))
        exchangeable = false;
    if (!same_ecc_prior(free[static_cast<std::size_t>(f)]->eccentricity_prior(priors), free[0]->eccentricity_prior(priors)))
      exchangeable = false;
  }
  const bool order = priors.order_periods && n_free > 1;
  s.constrain = order && !exchangeable;
  if (order && exchangeable) s.sorted = free;
  const std::string fixed_text =
      n_free < k ? fmt::format(" (planets named by transit times keep their letter and are not ordered: {} of {} ordered)",
                               n_free, k)
                 : std::string();
  if (!order) {
    out.ordering_note = n_free > 1 ? "planets not ordered by period (each mode counted k! times; evidence unaffected)"
                                   : "at most one planet to order: no labelling" + fixed_text;
  } else if (exchangeable) {
    out.ordering_note = fmt::format(
        "planets labelled by increasing period: the {} planets are drawn from identical independent priors and "
        "sorted by period; the sorted draw follows the ordered prior ({}! x the unordered density on "
        "P_{} < P_{} < ...), normalised, so ln Z equals the unordered evidence (no correction added){}",
        n_free, n_free, free[0]->label(), free[1]->label(), fixed_text);
  } else {
    const double frac = ordered_fraction(s, free);
    out.ln_evidence_offset = -std::log(frac);
    out.ordering_note = fmt::format(
        "planets labelled by increasing period: the planets have different priors, so the ordering is a "
        "constraint (zero likelihood outside) and ln Z includes -ln P(ordered{}) = {:.4f} (P = {:.5f} "
        "+- {:.5f} by Monte Carlo)",
        priors.periastron_limit_active() ? ", periastron outside the star" : "", out.ln_evidence_offset, frac,
        std::sqrt(frac * (1 - frac) / 200000.0));
  }
}

// Step 4: orbits crossing the star are excluded (zero likelihood there): the prior left
// is renormalised by the allowed fraction of each planet (already in the Monte Carlo of
// the ordering constraint).
void periastron_limit(Prepared& s, RvEvidenceProblem& out, std::vector<std::string>& notes) {
  const ModelPriors& priors = s.priors();
  const auto planets = s.layout().planets();
  s.periastron = priors.periastron_limit_active() && !planets.empty();
  if (!s.periastron) return;
  const double r_sun = priors.min_periastron_au * constants::kAu / constants::kRSun;
  if (s.constrain) {
    notes.push_back(fmt::format("orbits with periastron inside the star (a(1 - e) < {:.3g} R_sun) excluded", r_sun));
    return;
  }
  double ln_allowed = 0.0;
  for (const PlanetBlock* p : planets) ln_allowed += std::log(p->periastron_allowed_fraction(priors));
  if (!std::isfinite(ln_allowed))
    throw InputError("priors: every orbit of the period prior crosses the star (periastron inside the stellar "
                     "radius); check [search] min_period_d and [star]");
  out.ln_evidence_offset -= ln_allowed;
  notes.push_back(fmt::format(
      "orbits with periastron inside the star (a(1 - e) < {:.3g} R_sun) excluded; the prior is renormalised by "
      "the allowed fraction {:.4f} per planet (ln Z includes {:+.4f})",
      r_sun, planets.front()->periastron_allowed_fraction(priors), -ln_allowed));
}

const BlockCoordinates* coordinates_of(const Prepared& s, const ParameterBlock* b) {
  for (const auto& bc : s.cube)
    if (bc.block == b) return &bc;
  return nullptr;
}

// The phase window of a transit box around T_ref, in the t_conj coordinate (it wraps
// around the cube's edge when it must: two boxes then).
void add_phase_windows(Repartition& rep, double plo, double phi, double uc, double hh) {
  if (uc - hh < 0.0) {
    rep.add_window({plo, 0.0}, {phi, uc + hh}, uc + hh);
    rep.add_window({plo, uc - hh + 1.0}, {phi, 1.0}, hh - uc);
  } else if (uc + hh > 1.0) {
    rep.add_window({plo, uc - hh}, {phi, 1.0}, 1.0 - (uc - hh));
    rep.add_window({plo, 0.0}, {phi, uc + hh - 1.0}, uc + hh - 1.0);
  } else {
    rep.add_window({plo, uc - hh}, {phi, uc + hh}, 1.0);
  }
}

// Step 5: a transiting body's period and phase: a window of +-20 sigma around the linear
// ephemeris of its transit times (a box in the two coordinates).
void transit_windows(Prepared& s, int& n_cube) {
  const ModelPriors& priors = s.priors();
  for (const auto& term : s.posterior.terms()) {
    const auto* tt = dynamic_cast<const TransitTimesTerm*>(term.get());
    if (tt == nullptr) continue;
    const OrbitBlock& orbit = tt->orbit();
    const BlockCoordinates* bc = coordinates_of(s, &orbit);
    const int c_period = bc ? bc->coordinate(orbit.period_slot(), CubeRole::kQuantile) : -1;
    const int c_phase = bc ? bc->coordinate(orbit.t_conj_slot(), CubeRole::kPhase) : -1;
    if (c_period < 0) continue;
    const Prior& pp = priors.parameter[orbit.index(orbit.period_slot())];
    const Prior& tp = priors.parameter[orbit.index(orbit.t_conj_slot())];
    EphemerisResult eph;
    try {
      eph = fit_ephemeris(tt->times());
    } catch (const InputError&) {
      continue;  // fewer than two transits: no window
    }
    const double p_hat = eph.period_days.value, sp = eph.period_days.err;
    if (!(std::isfinite(p_hat) && std::isfinite(sp) && sp > 0.0) || !(p_hat > pp.lower() && p_hat < pp.upper()) ||
        !std::isfinite(pp.log_density(p_hat)))
      continue;
    const double up = prior_cdf(pp, p_hat);
    const double hp = std::clamp(std::exp(pp.log_density(p_hat)) * 20.0 * sp, 1e-12, 0.1);
    Repartition rep;
    rep.slots = {static_cast<std::size_t>(c_period)};
    const double plo = std::max(0.0, up - hp), phi = std::min(1.0, up + hp);
    const double t_ref_err = eph.t_ref_days.err;
    if (c_phase < 0 || !(std::isfinite(eph.t_ref_days.value) && std::isfinite(t_ref_err) && t_ref_err > 0.0)) {
      rep.add_window({plo}, {phi}, 1.0);
    } else {
      rep.slots.push_back(static_cast<std::size_t>(c_phase));
      const double centre = 0.5 * (tp.a + tp.b);
      const double t_ref = eph.reference_epoch_bjd + eph.t_ref_days.value - s.posterior.velocities()->data().reference_epoch_bjd;
      const double cycles = (centre - t_ref) / p_hat;
      const double s_phase = std::hypot(t_ref_err, cycles * sp) / p_hat;
      const double v = (t_ref - centre) / p_hat + 0.5;
      add_phase_windows(rep, plo, phi, v - std::floor(v), std::clamp(20.0 * s_phase, 1e-12, 0.25));
    }
    rep.normalise();
    rep.selector_slot = static_cast<std::size_t>(n_cube++);
    s.repartitions.push_back(std::move(rep));
  }
}

// A hint as a jump target in the cube of one planet: the period within about
// P^2 / baseline; K within half its value; the phase within 0.08 cycles.
NestedProblem::Jump::Target jump_target(const WeightedHint& wh, const Prior& pp, const Prior& kp, const Prior& tp,
                                        bool amplitude, bool phase, double baseline) {
  const double hint = wh.signal.period_days;
  const double sigma_p = 0.5 * hint * hint / baseline;
  NestedProblem::Jump::Target t;
  t.weight = wh.weight;
  t.period_u = prior_cdf(pp, hint);
  t.period_w = std::max(std::exp(pp.log_density(hint)) * sigma_p, 1e-9);
  const double kk = wh.signal.semi_amplitude_m_s;
  if (amplitude && std::isfinite(kk) && kk > kp.lower() && kk < kp.upper() && std::isfinite(kp.log_density(kk))) {
    t.amplitude_u = prior_cdf(kp, kk);
    t.amplitude_w = std::clamp(std::exp(kp.log_density(kk)) * 0.5 * kk, 0.005, 0.3);
  }
  if (phase && std::isfinite(wh.signal.t_conj_days)) {
    const double v = (wh.signal.t_conj_days - 0.5 * (tp.a + tp.b)) / hint + 0.5;
    t.phase_u = v - std::floor(v);
    t.phase_w = 0.08;
  }
  return t;
}

// Step 6: mode jumps on each free planet's block aimed at the hinted signals, and the
// hinted windows of its period (a selector coordinate each).
void jumps_and_windows(Prepared& s, std::span<const WeightedHint> hints, int& n_cube, NestedProblem& problem) {
  const ModelPriors& priors = s.priors();
  const double baseline = std::max(s.posterior.velocities()->data().baseline_days(), 1.0);
  for (const PlanetBlock* p : free_planets(s)) {
    const BlockCoordinates* bc = coordinates_of(s, p);
    const int c_period = bc ? bc->coordinate(PlanetBlock::kPeriod, CubeRole::kQuantile) : -1;
    if (c_period < 0) continue;
    NestedProblem::Jump jump;
    jump.coordinate = c_period;
    jump.small_coordinate = bc->coordinate(PlanetBlock::kAmplitude, CubeRole::kQuantile);
    jump.phase_coordinate = bc->coordinate(PlanetBlock::kTConj, CubeRole::kPhase);
    std::vector<int> others;
    for (std::size_t c = 0; c < bc->coords.size(); ++c)
      if (bc->coords[c].slot != PlanetBlock::kPeriod && bc->coords[c].slot != PlanetBlock::kAmplitude)
        others.push_back(static_cast<int>(bc->first + c));
    const Prior& pp = priors.parameter[p->index(PlanetBlock::kPeriod)];
    const Prior& kp = priors.parameter[p->index(PlanetBlock::kAmplitude)];
    const Prior& tp = priors.parameter[p->index(PlanetBlock::kTConj)];
    Repartition rep;
    for (const WeightedHint& wh : hints) {
      const double hint = wh.signal.period_days;
      if (!(hint > pp.lower() && hint < pp.upper()) || !std::isfinite(pp.log_density(hint)) || !(wh.weight > 0.0))
        continue;
      const auto t = jump_target(wh, pp, kp, tp, jump.small_coordinate >= 0, jump.phase_coordinate >= 0, baseline);
      jump.targets.push_back(t);
      rep.add_window({std::max(0.0, t.period_u - t.period_w)}, {std::min(1.0, t.period_u + t.period_w)}, wh.weight);
    }
    if (!rep.lo.empty()) {
      rep.normalise();
      rep.slots = {static_cast<std::size_t>(c_period)};
      rep.selector_slot = static_cast<std::size_t>(n_cube);
      others.push_back(n_cube++);
      s.repartitions.push_back(std::move(rep));
    }
    jump.redraw_uniform = others;
    problem.jumps.push_back(std::move(jump));
  }
}

// The prior transform: fixed values, the repartitioned coordinates moved (pi~), each
// block from its coordinates, exchangeable planets sorted by period.
void transform(const Prepared& s, std::span<const double> u_prior, std::span<double> theta) {
  for (std::size_t i = 0; i < s.fixed.size(); ++i) theta[i] = s.fixed[i];
  thread_local std::vector<double> moved;
  moved.assign(u_prior.begin(), u_prior.end());
  double ln_ratio = 0.0;
  for (const auto& rp : s.repartitions) ln_ratio += rp.apply(moved, kRepartitionAlpha);
  if (!s.repartitions.empty()) theta[s.n_total] = ln_ratio;
  const std::span<const double> u(moved);
  for (const auto& bc : s.cube) bc.block->from_cube(u.subspan(bc.first, bc.coords.size()), bc.coords, s.priors(), theta);
  // Insertion sort of the free planets' blocks by period (k is small).
  for (std::size_t j = 1; j < s.sorted.size(); ++j)
    for (std::size_t m = j; m > 0 && s.sorted[m]->period(theta) < s.sorted[m - 1]->period(theta); --m)
      s.sorted[m]->swap_values(theta, *s.sorted[m - 1]);
}

double likelihood(const Prepared& s, std::span<const double> theta_all, bool integrate,
                  std::vector<KeplerianModel::OffsetConditional>* conditionals = nullptr) {
  const std::span<const double> theta = theta_all.first(s.n_total);
  const ModelPriors& priors = s.priors();
  if (s.constrain && s.layout().first_unordered_planet(theta, priors) >= 0) return -kInf;
  if (s.periastron)
    for (const PlanetBlock* p : s.layout().planets())
      if (!p->periastron_allowed(theta, priors)) return -kInf;
  const VelocityTerm& v = *s.posterior.velocities();
  double l = integrate ? v.log_likelihood_offsets_integrated(theta, s.integrated, conditionals) : v.log_likelihood(theta);
  if (!std::isfinite(l)) return l;
  for (const auto& t : s.posterior.terms())
    if (t.get() != &v) l += t->log_likelihood(theta);
  return l;
}

// Step 7: the NestedProblem's functions.
void assemble(std::shared_ptr<const Prepared> s, int n_cube, RvEvidenceProblem& out) {
  NestedProblem& problem = out.problem;
  problem.dimension = n_cube;
  out.n_integrated_params = static_cast<int>(s->integrated.size());
  out.n_free_params = out.n_integrated_params;
  for (const auto& bc : s->cube) out.n_free_params += static_cast<int>(bc.coords.size());
  problem.slice_steps_per_dimension = free_planets(*s).size() > 1 ? 5.0 : 3.0;
  problem.n_params = static_cast<int>(s->n_total) + (s->repartitions.empty() ? 0 : 1);
  if (!s->repartitions.empty()) problem.log_prior_ratio_index = static_cast<int>(s->n_total);
  problem.names = s->layout().names();
  problem.prior_transform = [s](std::span<const double> u, std::span<double> theta) { transform(*s, u, theta); };
  const bool integrate = !s->integrated.empty();
  problem.log_likelihood = [s, integrate](std::span<const double> theta) { return likelihood(*s, theta, integrate); };
  if (!integrate) return;
  problem.complete_point = [s](std::span<double> theta, std::mt19937_64* rng) {
    std::vector<KeplerianModel::OffsetConditional> cond;
    if (!std::isfinite(likelihood(*s, theta, true, &cond))) return -kInf;
    s->posterior.velocities()->complete_offsets(theta.first(s->n_total), s->integrated, rng);
    return likelihood(*s, theta, false);  // the same terms with the offsets in place, none integrated
  };
}

}  // namespace

RvEvidenceProblem make_rv_evidence_problem(const KeplerianModel& model, const ModelPriors& priors,
                                           bool phase_conjunction, const EvidenceTransits* transits,
                                           std::span<const WeightedHint> hints) {
  const std::size_t n_params = model.parameters().n_params();
  if (priors.parameter.size() != n_params ||
      priors.eccentricity.size() < static_cast<std::size_t>(model.layout().n_planets))
    throw InputError(fmt::format("evidence: the priors have {} parameters for a model with {}",
                                 priors.parameter.size(), n_params));
  RvEvidenceProblem out;
  std::vector<std::string> extra_notes;
  auto s = std::make_shared<Prepared>(compose(model, priors, transits, extra_notes));
  s->n_total = s->layout().n_params();
  assign_coordinates(*s, phase_conjunction, true, out.prior_notes);
  ordering(*s, out);
  periastron_limit(*s, out, out.prior_notes);
  out.prior_notes.insert(out.prior_notes.end(), extra_notes.begin(), extra_notes.end());
  out.n_transit_points = s->posterior.n_transit_points();
  int n_cube = 0;
  for (const auto& bc : s->cube) n_cube += static_cast<int>(bc.coords.size());
  transit_windows(*s, n_cube);
  jumps_and_windows(*s, hints, n_cube, out.problem);
  assemble(std::move(s), n_cube, out);
  return out;
}

}  // namespace apsides
