// The periastron limit of the priors, planets whose letter is fixed by transit times, the
// nested sampler's mode jumps, and transit times in the model comparison.
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <string>
#include <vector>

#include "apsides/constants.h"
#include "apsides/evidence.h"
#include "apsides/fit.h"
#include "apsides/model_priors.h"
#include "apsides/project.h"
#include "test_support.h"

using namespace apsides;

namespace {
ModelPriors one_planet_priors(EccentricityPriorKind kind) {
  ModelPriors p;
  p.parameter = {Prior::log_uniform(0.5, 4000.0), Prior::modified_jeffreys(1.5, 200.0), Prior::uniform(-1, 1),
                 Prior::uniform(-1, 1), Prior::uniform(-2000, 2000)};
  EccentricityPrior ep;
  ep.kind = kind;
  p.eccentricity = {ep};
  p.star_mass_msun = 0.86;
  p.min_periastron_au = 0.82 * constants::kRSun / constants::kAu;
  return p;
}

double fraction_by_scipy(const std::string& e_cdf) {
  // Independent of the library: Kepler's third law with astropy's IAU 2015 nominal
  // GM_sun, R_sun and au, and scipy.integrate.quad over ln P (log-uniform prior).
  const auto r = test::run_python(
      "import numpy as np\n"
      "from scipy import integrate, stats\n"
      "from astropy import constants as c, units as u\n"
      "gm = c.GM_sun.to_value(u.m**3/u.s**2) * 0.86\n"
      "rmin = 0.82 * c.R_sun.to_value(u.m)\n"
      "lo, hi = np.log(0.5), np.log(4000.0)\n"
      "def allowed(lnp):\n"
      "    p = np.exp(lnp) * 86400.0\n"
      "    a = (gm * p * p / (4 * np.pi**2)) ** (1/3)\n"
      "    x = 1 - rmin / a\n"
      "    return " + e_cdf + "\n"
      "v, err = integrate.quad(lambda t: allowed(t) / (hi - lo), lo, hi, points=[np.log(0.5), np.log(3.0)], limit=400, epsabs=1e-12)\n"
      "print(repr(v))\n");
  REQUIRE(r.status == 0);
  return std::stod(r.output);
}
}  // namespace

TEST_SUITE("model_limits") {
  TEST_CASE("model_limits: the allowed prior fraction of the periastron limit equals scipy's quadrature") {
    // Uniform e on [0, 0.99): P(e < x) = clip(x / 0.99, 0, 1).
    const ModelPriors uni = one_planet_priors(EccentricityPriorKind::kUniform);
    const double f_uni = uni.periastron_allowed_fraction(uni.parameter[0], uni.eccentricity[0]);
    CHECK(f_uni == doctest::Approx(fraction_by_scipy("np.clip(x / 0.99, 0, 1) if x > 0 else 0.0")).epsilon(1e-7));
    // Kipping (2013) Beta(0.867, 3.03) truncated at 0.99.
    const ModelPriors beta = one_planet_priors(EccentricityPriorKind::kBeta);
    const double f_beta = beta.periastron_allowed_fraction(beta.parameter[0], beta.eccentricity[0]);
    CHECK(f_beta == doctest::Approx(fraction_by_scipy(
                                        "(stats.beta(0.867, 3.03).cdf(min(max(x, 0), 0.99)) / "
                                        "stats.beta(0.867, 3.03).cdf(0.99))"))
                        .epsilon(1e-7));
    CHECK(f_uni < 1.0);
    CHECK(f_beta > f_uni);  // the Beta prior puts less weight on the high eccentricities excluded
  }

  TEST_CASE("model_limits: an orbit crossing the star is outside the prior, a wide one inside") {
    const ModelPriors p = one_planet_priors(EccentricityPriorKind::kUniform);
    // P = 1.455 d around 0.86 Msun: a = 0.0239 au = 5.1 R_sun, so e = 0.94 puts the
    // periastron at 0.31 R_sun, inside the 0.82 R_sun star; e = 0.5 keeps it outside.
    const double e_bad = 0.94, e_ok = 0.5;
    ParameterLayout one_planet;
    one_planet.add(std::make_unique<PlanetBlock>("b"));
    std::vector<double> theta = {1.455, 3.0, std::sqrt(e_bad), 0.0, 0.0};
    CHECK_FALSE(std::isfinite(one_planet.log_prior(theta, p)));
    theta[2] = std::sqrt(e_ok);
    CHECK(std::isfinite(one_planet.log_prior(theta, p)));
    CHECK(p.periastron_max_eccentricity(1.455) == doctest::Approx(1.0 - 0.82 / 5.14).epsilon(0.01));
  }

  TEST_CASE("model_limits: a planet named by transit times keeps its letter when a shorter period is added") {
    // The demo's transiting planet is "b" (6.41 d). A three-planet fit may find a signal
    // below 6.41 d; it must then be c or d, never take b's transit times.
    const Project project = load_project(test::source_dir() + "/datasets_synthetic/demo/project.toml");
    const VelocityData data = project.load_velocities();
    const SearchProblem sp = search_problem(project, data, project.load_transits());
    const FitProblem pb = make_fit_problem(sp, 3);
    REQUIRE(pb.priors.label_fixed.size() == 3);
    CHECK(pb.priors.label_fixed[0]);
    CHECK_FALSE(pb.priors.label_fixed[1]);
    // Ordering ignores b: c < d is required, b may be anywhere.
    std::vector<double> theta(pb.layout.n_params(), 0.0);
    for (std::size_t i = 0; i < theta.size(); ++i)
      if (std::isfinite(pb.priors.parameter[i].lower()) && std::isfinite(pb.priors.parameter[i].upper()))
        theta[i] = 0.5 * (pb.priors.parameter[i].lower() + pb.priors.parameter[i].upper());
    theta[0] = 6.41;
    theta[5] = 0.9;    // c shorter than b: allowed
    theta[10] = 118.0;
    theta[1] = theta[6] = theta[11] = 5.0;
    const ParameterLayout blocks = ParameterLayout::from(pb.layout, data.instrument_names);
    CHECK(blocks.first_unordered_planet(theta, pb.priors) == -1);
    theta[10] = 0.8;  // d shorter than c: not allowed
    CHECK(blocks.first_unordered_planet(theta, pb.priors) == 2);

    const FitResult fit = fit_map(pb, FitOptions{});
    CAPTURE(fit.FullReport());
    CHECK(fit.theta[0] == doctest::Approx(6.4127).epsilon(1e-3));
    CHECK(std::isfinite(fit.log_likelihood));
    CHECK(fit.theta[5] < fit.theta[10]);
  }

  TEST_CASE("model_limits: mode jumps keep nested sampling exact on two narrow modes of unequal mass") {
    // Two narrow Gaussian modes in the unit square, masses 0.8 and 0.2 (sigma 0.004): the
    // evidence is analytic (the sum of the masses times the prior density 1) and the
    // posterior mass of each mode is known. The jumps target both modes and a wrong place.
    NestedProblem p;
    p.dimension = 2;
    p.prior_transform = [](std::span<const double> u, std::span<double> th) {
      th[0] = u[0];
      th[1] = u[1];
    };
    const double s = 0.004;
    // In log space throughout: a floor (log(... + 1e-300)) would make a likelihood plateau
    // over most of the square, which no nested sampler can order.
    p.log_likelihood = [s](std::span<const double> x) {
      auto ln_g = [s](double dx, double dy) {
        return -0.5 * (dx * dx + dy * dy) / (s * s) - std::log(2.0 * constants::kPi * s * s);
      };
      const double a = std::log(0.8) + ln_g(x[0] - 0.2, x[1] - 0.5);
      const double b = std::log(0.2) + ln_g(x[0] - 0.85, x[1] - 0.5);
      const double m = std::max(a, b);
      return m + std::log(std::exp(a - m) + std::exp(b - m));
    };
    NestedProblem::Jump jump;
    jump.coordinate = 0;
    jump.small_coordinate = -1;
    jump.redraw_uniform = {1};
    for (double c : {0.2, 0.85, 0.5}) {
      NestedProblem::Jump::Target t;
      t.period_u = c;
      t.period_w = 0.01;
      jump.targets.push_back(t);
    }
    p.jumps = {jump};
    std::vector<double> ln_z, mass_a;
    for (std::uint64_t seed = 1; seed <= 6; ++seed) {
      NestedOptions o;
      o.live_points = 200;
      o.seed = seed;
      o.threads = 2;
      const NestedResult r = run_nested_sampling(p, o);
      REQUIRE(r.termination == NestedTermination::kConverged);
      ln_z.push_back(r.ln_evidence);
      double a = 0.0;
      for (const auto& smp : r.samples)
        if (smp.theta[0] < 0.5) a += std::exp(smp.ln_weight);
      mass_a.push_back(a);
      // Analytic ln Z = ln(0.8 + 0.2) = 0 (both modes lie far inside the square).
      CAPTURE(r.BriefReport());
      CHECK(std::fabs(r.ln_evidence) < 3.0 * r.ln_evidence_err);
    }
    double mean_a = 0.0;
    for (double a : mass_a) mean_a += a / static_cast<double>(mass_a.size());
    CHECK(mean_a == doctest::Approx(0.8).epsilon(0.1));
  }

  TEST_CASE("model_limits: transit times join every model of the comparison, a transit-only ephemeris without b") {
    const Project project = load_project(test::source_dir() + "/datasets_synthetic/demo/project.toml");
    const VelocityData data = project.load_velocities();
    const TransitData transits = project.load_transits();
    ModelLayout base;
    base.n_instruments = static_cast<int>(data.n_instruments());
    CompareOptions opt;
    opt.min_planets = 0;
    opt.max_planets = 1;
    opt.nested.live_points = 150;
    opt.nested.seed = 5;
    const auto priors_for = [&](const ModelLayout& l) {
      return build_priors(data, l, project.search, project.model, project.priors, 3, &project.star);
    };
    const CompareResult r = compare_planet_counts(data, base, priors_for, opt, {}, &transits);
    CAPTURE(r.FullReport());
    REQUIRE(r.rows.size() == 2);
    // k = 0: offsets + jitters (6) + the transit-only (P, t_conj) of b.
    CHECK(r.rows[0].n_params == 8);
    CHECK(r.rows[1].n_params == 11);
    CHECK(r.n_points == data.size() + transits.size());
    // Both rows pin b's period from the transit times (demo truth 6.4127 d, scenario.toml).
    // (k = 0: the transit-only period follows the model's 6 parameters.)
    CHECK(r.rows[0].nested.weighted_quantile(6, 0.5) == doctest::Approx(6.4127).epsilon(1e-4));
    CHECK(r.rows[1].nested.weighted_quantile(0, 0.5) == doctest::Approx(6.4127).epsilon(1e-4));
    // The velocity signal of b is then very strongly supported (Kass & Raftery 1995).
    CHECK(r.rows[1].ln_bayes_vs_previous > 5.0);
  }

  TEST_CASE("model_limits: a transit-time jitter is fitted jointly and matches scipy's maximum likelihood on the times alone") {
    // The demo's transit times with extra Gaussian scatter of 0.002 d (seeded, numpy),
    // fitted jointly with the velocities ([[transits]] fit_jitter = true). The transit
    // times fix P and T_conj far better than the velocities, so the joint MAP jitter
    // should equal the maximum-likelihood jitter of a linear ephemeris fitted to the times
    // alone (scipy.optimize), up to the gentle half-normal prior.
    const std::string dir = test::temp_dir("transit_jitter");
    const std::string demo = test::source_dir() + "/datasets_synthetic/demo";
    const auto py = test::run_python(
        "import numpy as np, shutil, scipy.optimize as so\n"
        "src = '" + demo + "'; dst = '" + dir + "'\n"
        "for f in ['velocities_Kestrel.csv', 'velocities_Tern.csv', 'velocities_Petrel.csv']: shutil.copy(f'{src}/{f}', dst)\n"
        "d = np.genfromtxt(f'{src}/transits.csv', delimiter=',', names=True)\n"
        "rng = np.random.default_rng(7)\n"
        "t = d['t_mid_bjd'] + rng.normal(0, 0.002, d.size)\n"
        "with open(f'{dst}/transits.csv', 'w') as fh:\n"
        "    fh.write('epoch,t_mid_bjd,uncertainty_d\\n')\n"
        "    for n, ti, s in zip(d['epoch'].astype(int), t, d['uncertainty_d']): fh.write(f'{n},{ti:.7f},{s:.7f}\\n')\n"
        "proj = open(f'{src}/project.toml').read().replace('planet = \"b\"', 'planet = \"b\"\\nfit_jitter = true')\n"
        "open(f'{dst}/project.toml', 'w').write(proj)\n"
        "n = d['epoch']; s = d['uncertainty_d']; t0 = t[0]\n"
        "def nll(x):\n"
        "    v = s**2 + x[2]**2\n"
        "    r = t - t0 - x[0] - n * x[1]\n"
        "    return 0.5 * np.sum(r * r / v + np.log(v))\n"
        "p0 = np.polyfit(n, t - t0, 1)\n"
        "best = so.minimize(nll, [p0[1], p0[0], 0.001], method='Nelder-Mead', options={'xatol': 1e-12, 'fatol': 1e-12, 'maxiter': 40000})\n"
        "print(repr(abs(best.x[2])))\n");
    REQUIRE(py.status == 0);
    const double scipy_jitter = std::stod(py.output);
    const Project project = load_project(dir + "/project.toml");
    REQUIRE(project.transit_jitter_planets() == std::vector<int>{0});
    const VelocityData data = project.load_velocities();
    const SearchProblem sp = search_problem(project, data, project.load_transits());
    const FitProblem pb = make_fit_problem(sp, 2);
    const long ji = pb.layout.transit_jitter_index(0);
    REQUIRE(ji == static_cast<long>(pb.layout.n_params()) - 1);
    CHECK(pb.layout.names(data.instrument_names).back() == "b.transit_jitter_d");
    const FitResult fit = fit_map(pb, FitOptions{});
    CAPTURE(fit.FullReport());
    CAPTURE(scipy_jitter);
    CHECK(fit.theta[static_cast<std::size_t>(ji)] == doctest::Approx(scipy_jitter).epsilon(0.15));
    CHECK(fit.theta[static_cast<std::size_t>(ji)] > 0.001);
  }
}
