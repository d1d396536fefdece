// Gaussian-process noise (include/apsides/gp.h, gp_kernels.h): every solver against a
// reference outside the project, computed in the test by /usr/bin/python3:
//  * ln L of every kernel against a dense Cholesky of the same kernel matrix built in
//    numpy from the kernels' published closed forms (scipy.linalg.cho_factor), N = 50,
//    500 (2000 in gp_long_test.cpp), relative error <= 1e-8;
//  * the quasi-periodic kernel's ln L against scikit-learn's GaussianProcessRegressor;
//  * the SHO closed form against the numerical Fourier transform of its power spectrum
//    (scipy.integrate.quad, weight='cos'), Foreman-Mackey et al. 2017 Eqs. (20)-(23);
//  * solve, K x, conditional mean and sd, random draws, generalised least squares
//    against the dense numpy formulas;
//  * the multi-series covariance (Rajpaul et al. 2015) against the covariance of a
//    finite-difference derivative process built in numpy from gamma alone.
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <cmath>
#include <fstream>
#include <nlohmann/json.hpp>
#include <random>
#include <sstream>
#include <algorithm>
#include <string>
#include <vector>

#include "apsides/error.h"
#include "apsides/gp.h"
#include "gp_test_support.h"
#include "test_support.h"

using namespace apsides;
using namespace apsides::gp;
using nlohmann::json;
using namespace apsides::gp_test;


TEST_SUITE("gp") {

TEST_CASE("gp: the SHO closed form is the Fourier transform of its power spectrum (scipy quad)") {
  // Foreman-Mackey et al. 2017 Eq. (20) S(omega) and Eq. (23) k(tau), related by
  // k(tau) = sqrt(2/pi) int_0^inf S(omega) cos(omega tau) d omega (their unitary
  // convention). S(omega) is evaluated in numpy from the formula, not from our code.
  std::string code = "import numpy as np\nfrom scipy.integrate import quad\n";
  code += "def S(w, S0, w0, Q): return np.sqrt(2/np.pi)*S0*w0**4/((w*w-w0*w0)**2 + w0*w0*w*w/(Q*Q))\n";
  const std::vector<double> lags{0.0, 1.0, 5.0, 17.0, 40.0};
  std::vector<OscillatorKernel> kernels{{4.0, 20.0, 3.0}, {4.0, 20.0, 0.5}, {2.0, 7.0, 0.3}, {1.0, 30.0, 12.0}};
  for (const auto& k : kernels)
    for (double tau : lags) {
      if (tau == 0.0)
        code += fmt::format("print(np.sqrt(2/np.pi)*quad(S, 0, np.inf, args=({:.17g},{:.17g},{:.17g}), epsabs=0, epsrel=1e-12, limit=500)[0])\n",
                            k.s0(), k.omega0(), k.quality);
      else
        code += fmt::format("print(np.sqrt(2/np.pi)*quad(S, 0, np.inf, args=({:.17g},{:.17g},{:.17g}), weight='cos', wvar={:.17g}, epsabs=1e-13, limlst=200)[0])\n",
                            k.s0(), k.omega0(), k.quality, tau);
    }
  const auto res = test::run_python(code);
  REQUIRE_MESSAGE(res.status == 0, res.output);
  std::istringstream in(res.output);
  for (const auto& k : kernels)
    for (double tau : lags) {
      double ref = 0.0;
      REQUIRE(static_cast<bool>(in >> ref));
      const double var = k.amplitude_ms * k.amplitude_ms;
      INFO("Q = " << k.quality << ", tau = " << tau << ": closed form " << k.value(tau) << ", quad " << ref);
      CHECK(std::abs(k.value(tau) - ref) <= 1e-7 * var);
      // ... and the semiseparable terms reproduce the closed form.
      CHECK(std::abs(k.semiseparable().value(tau) - k.value(tau)) <= 1e-12 * var);
      CHECK(std::abs(k.value(0.0) - var) <= 1e-12 * var);
    }
}

TEST_CASE("gp: terms of the rotation and Matern kernels reproduce their closed forms") {
  const RotationKernel rot{27.0, 5.0, 1.2, 2.0, 0.6};
  CHECK(rot.semiseparable().width() == 4);
  CHECK(rot.value(0.0) == doctest::Approx(25.0).epsilon(1e-13));
  // The kernel oscillates at P: the fundamental's eta omega0 = 2 pi / P.
  const OscillatorKernel f = rot.fundamental();
  const double eta = std::sqrt(1.0 - 1.0 / (4.0 * f.quality * f.quality));
  CHECK(eta * f.omega0() == doctest::Approx(2.0 * M_PI / 27.0).epsilon(1e-13));
  for (double tau : {0.0, 3.0, 13.5, 27.0, 80.0})
    CHECK(rot.semiseparable().value(tau) == doctest::Approx(rot.value(tau)).epsilon(1e-12));
  // Matern eps approximation: close to the exact Matern-3/2 for eps << sqrt(3)/rho.
  const Matern32Kernel m{3.0, 12.0, 0.001};
  for (double tau : {0.0, 2.0, 10.0, 30.0, 100.0})
    CHECK(std::abs(m.value(tau) - m.exact_value(tau)) < 1e-4 * 9.0);
}

TEST_CASE("gp: ln L of every kernel matches a dense scipy Cholesky, N = 50 and 500") {
  gp_test::check_lnlike_against_scipy({50, 500}, "lnlike");
}

TEST_CASE("gp: the Matern epsilon approximation stays close to the exact Matern-3/2 ln L (numpy)") {
  // eps = 0.01 / d against sqrt(3)/rho = 0.14 / d: the approximation changes ln L by
  // a small fraction of a nat, and less as eps -> 0.
  const Points p = make_points(300, 77);
  SemiseparableGP gp;
  json cases = json::array();
  std::vector<double> ours;
  for (double eps : {0.01, 0.001}) {
    const Matern32Kernel m{3.0, 12.0, eps};
    REQUIRE(gp.compute(m.semiseparable(), p.t, p.var).empty());
    ours.push_back(gp.log_likelihood(p.r));
  }
  cases.push_back({{"task", "lnlike"}, {"kind", "matern32_exact"}, {"params", {{"amplitude_ms", 3.0}, {"timescale_d", 12.0}}},
                   {"t", p.t}, {"var", p.var}, {"r", p.r}});
  const double exact = run_reference(cases, "matern")[0].get<double>();
  CHECK(std::abs(ours[0] - exact) < 0.5);
  CHECK(std::abs(ours[1] - exact) < 0.1 * std::abs(ours[0] - exact) + 1e-6);
}

TEST_CASE("gp: the quasi-periodic ln L matches scikit-learn's GaussianProcessRegressor") {
  // sklearn: ConstantKernel(eta1^2) * RBF(eta2) * ExpSineSquared(length_scale, eta3) +
  // WhiteKernel(jitter^2), per-point stated variances through alpha. ExpSineSquared is
  // exp(-2 sin^2(pi tau / p) / l^2), so l = 2 eta4 gives our sin^2 / (2 eta4^2).
  const QuasiPeriodicKernel qp{4.5, 35.0, 23.0, 0.45};
  const double jitter = 1.3;
  Points p = make_points(200, 5);
  std::vector<double> stated(p.t.size()), var(p.t.size());
  for (std::size_t i = 0; i < p.t.size(); ++i) {
    stated[i] = 1.0 + 0.5 * std::abs(std::cos(0.2 * static_cast<double>(i)));
    var[i] = stated[i] * stated[i] + jitter * jitter;
  }
  DenseGP gp;
  REQUIRE(gp.compute(qp, p.t, var).empty());
  const double ours = gp.log_likelihood(p.r);
  const std::string code = fmt::format(R"PY(
import numpy as np
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, RBF, ExpSineSquared, WhiteKernel
t = np.array({t}); y = np.array({y}); s = np.array({s})
k = (ConstantKernel({eta1} ** 2, constant_value_bounds="fixed") * RBF({eta2}, length_scale_bounds="fixed")
     * ExpSineSquared(length_scale=2 * {eta4}, periodicity={eta3}, length_scale_bounds="fixed", periodicity_bounds="fixed")
     + WhiteKernel({jit} ** 2, noise_level_bounds="fixed"))
g = GaussianProcessRegressor(kernel=k, alpha=s ** 2, optimizer=None, normalize_y=False).fit(t[:, None], y)
print(repr(g.log_marginal_likelihood_value_))
)PY",
                                       fmt::arg("t", json(p.t).dump()), fmt::arg("y", json(p.r).dump()),
                                       fmt::arg("s", json(stated).dump()), fmt::arg("eta1", qp.amplitude_ms),
                                       fmt::arg("eta2", qp.evolution_timescale_d), fmt::arg("eta3", qp.period_d),
                                       fmt::arg("eta4", qp.smoothness), fmt::arg("jit", jitter));
  const auto res = test::run_python(code);
  REQUIRE_MESSAGE(res.status == 0, res.output);
  const double ref = std::stod(res.output);
  INFO("ours " << ours << ", sklearn " << ref);
  CHECK(rel_err(ours, ref) <= 1e-8);
}

TEST_CASE("gp: the latent quasi-periodic derivatives match finite differences") {
  const LatentQuasiPeriodic lat{30.0, 21.0, 0.4};
  for (double tau : {-50.0, -7.3, -0.5, 0.0, 0.2, 4.0, 10.5, 33.0, 61.0}) {
    const double h = 1e-4;
    const auto v = lat.value(tau), vp = lat.value(tau + h), vm = lat.value(tau - h);
    INFO("tau = " << tau);
    CHECK(v.first == doctest::Approx((vp.gamma - vm.gamma) / (2 * h)).epsilon(1e-7).scale(1e-3));
    CHECK(v.second == doctest::Approx((vp.gamma - 2 * v.gamma + vm.gamma) / (h * h)).epsilon(1e-5).scale(1e-2));
    CHECK(v.second == doctest::Approx((vp.first - vm.first) / (2 * h)).epsilon(1e-7).scale(1e-3));
  }
}

TEST_CASE("gp: the multi-series covariance is that of a finite-difference derivative process (numpy)") {
  // X = alpha G + beta dG/dt with dG/dt ~ (G(t + h) - G(t - h)) / (2h): its covariance
  // follows from gamma alone, with no derivative formula; it must approach ours as h -> 0.
  const LatentQuasiPeriodic lat{40.0, 27.0, 0.6};
  const Points a = make_points(40, 11), b = make_points(30, 12);
  const std::vector<SeriesInput> series{{a.t, a.var, 3.0, 25.0}, {b.t, b.var, 1.5, -4.0}};
  MultiSeriesGP gp;
  REQUIRE(gp.compute(lat, series).empty());
  const std::string code = fmt::format(R"PY(
import numpy as np
le, P, lp, h = 40.0, 27.0, 0.6, 1e-3
gam = lambda x: np.exp(-x ** 2 / (2 * le ** 2) - np.sin(np.pi * x / P) ** 2 / (2 * lp ** 2))
t = np.concatenate([np.array({ta}), np.array({tb})])
al = np.array([3.0] * {na} + [1.5] * {nb}); be = np.array([25.0] * {na} + [-4.0] * {nb})
# X_i = al_i G(t_i) + be_i (G(t_i + h) - G(t_i - h)) / (2h): a sum over three shifts.
shifts = [(0.0, lambda a, b: a), (h, lambda a, b: b / (2 * h)), (-h, lambda a, b: -b / (2 * h))]
K = np.zeros((len(t), len(t)))
for si, wi in shifts:
    for sj, wj in shifts:
        K += np.outer(wi(al, be), wj(al, be)) * gam((t[:, None] + si) - (t[None, :] + sj))
print(" ".join(repr(x) for x in K.ravel()))
)PY",
                                       fmt::arg("ta", json(a.t).dump()), fmt::arg("tb", json(b.t).dump()),
                                       fmt::arg("na", a.t.size()), fmt::arg("nb", b.t.size()));
  const auto res = test::run_python(code);
  REQUIRE_MESSAGE(res.status == 0, res.output);
  std::istringstream in(res.output);
  const std::size_t n = a.t.size() + b.t.size();
  double worst = 0.0;
  for (std::size_t i = 0; i < n; ++i)
    for (std::size_t j = 0; j < n; ++j) {
      double ref = 0.0;
      REQUIRE(static_cast<bool>(in >> ref));
      const std::size_t si = i < a.t.size() ? 0 : 1, sj = j < a.t.size() ? 0 : 1;
      const double ti = si ? b.t[i - a.t.size()] : a.t[i], tj = sj ? b.t[j - a.t.size()] : a.t[j];
      worst = std::max(worst, std::abs(gp.covariance(si, ti, sj, tj) - ref));
    }
  // Entries are up to ~ (25 * 0.2)^2 ~ 30; h = 1e-3 leaves O(h^2) ~ 1e-6 differences.
  CHECK(worst < 1e-4);
  // Sign convention, by hand: cov(G'(t), G(t')) = gamma'(t - t').
  const auto v = lat.value(2.0);
  const std::vector<double> one{0.0}, two{2.0}, unit{1.0};
  const std::vector<SeriesInput> pair{{two, unit, 0.0, 1.0}, {one, unit, 1.0, 0.0}};
  REQUIRE(gp.compute(lat, pair).empty());
  CHECK(gp.covariance(0, 2.0, 1, 0.0) == doctest::Approx(v.first));
}

TEST_CASE("gp: solve, K x, prediction, draws and least squares match the dense numpy formulas") {
  const RotationKernel rot{27.0, 5.0, 1.2, 2.0, 0.6};
  const QuasiPeriodicKernel qp{5.0, 40.0, 27.0, 0.6};
  const Points p = make_points(300, 21, 300.0, 0.7);
  const std::size_t n = p.t.size(), nrhs = 3, ncols = 3;
  std::vector<double> B(n * nrhs), A(n * ncols);
  for (std::size_t i = 0; i < n; ++i) {
    for (std::size_t k = 0; k < nrhs; ++k) B[k * n + i] = std::cos(0.1 * static_cast<double>((k + 1) * i));
    A[i] = i % 2 ? 0.0 : 1.0;                 // offset of instrument 0
    A[n + i] = i % 2 ? 1.0 : 0.0;             // offset of instrument 1
    A[2 * n + i] = (p.t[i] - 1234.5) / 100.0;  // linear trend
  }
  std::vector<double> t_star, s_star;
  for (int q = 0; q < 60; ++q) {
    t_star.push_back(1234.5 - 200.0 + 7.1 * q);  // beyond both ends of the data too
    s_star.push_back(q % 3 ? 1.0 : 0.7);
  }
  t_star.push_back(p.t[17]);  // exactly at a data time
  s_star.push_back(1.0);
  std::swap(t_star[3], t_star[40]);  // not sorted

  for (int which = 0; which < 2; ++which) {
    SemiseparableGP semi;
    DenseGP dense;
    std::vector<double> X(n * nrhs), KX(n * nrhs);
    Prediction pred;
    LinearSolution ls;
    json jc{{"task", "dense_ops"}, {"t", p.t}, {"var", p.var}, {"r", p.r}, {"scale", p.scale}, {"B", B},
            {"nrhs", nrhs}, {"A", A}, {"ncols", ncols}, {"t_star", t_star}, {"scale_star", s_star}};
    if (which == 0) {
      REQUIRE(semi.compute(rot.semiseparable(), p.t, p.var, p.scale).empty());
      semi.solve(B, X, nrhs);
      semi.multiply(B, KX, nrhs);
      pred = semi.predict(p.r, t_star, true, s_star);
      ls = semi.least_squares(A, ncols, p.r);
      jc["kind"] = "rotation";
      jc["params"] = params_json(rot.parameters(), rot.to_vector());
    } else {
      REQUIRE(dense.compute(qp, p.t, p.var, p.scale).empty());
      dense.solve(B, X, nrhs);
      pred = dense.predict(p.r, t_star, true, s_star);
      ls = dense.least_squares(A, ncols, p.r);
      jc["kind"] = "qp";
      jc["params"] = params_json(qp.parameters(), qp.to_vector());
    }
    const json ref = run_reference(json::array({jc}), "ops")[0];
    const std::string label = which == 0 ? "rotation (semiseparable)" : "quasi-periodic (dense)";
    INFO(label);
    auto close = [](const std::vector<double>& ours, const json& theirs, double tol) {
      REQUIRE(ours.size() == theirs.size());
      double scale = 0.0, worst = 0.0;
      for (std::size_t i = 0; i < ours.size(); ++i) scale = std::max(scale, std::abs(theirs[i].get<double>()));
      for (std::size_t i = 0; i < ours.size(); ++i) worst = std::max(worst, std::abs(ours[i] - theirs[i].get<double>()));
      INFO("worst " << worst << " of scale " << scale);
      CHECK(worst <= tol * scale);
    };
    close(X, ref["solve"], 1e-9);
    if (which == 0) close(KX, ref["Kx"], 1e-12);
    close(pred.mean, ref["mean"], 1e-9);
    close(pred.sd, ref["sd"], 1e-7);
    REQUIRE_MESSAGE(ls.message.empty(), ls.message);
    close(ls.coefficients, ref["beta"], 1e-9);
    close(ls.covariance, ref["cov"], 1e-9);
    CHECK(ls.log_det_normal == doctest::Approx(ref["logdetN"].get<double>()).epsilon(1e-10));
    CHECK(ls.chi_square == doctest::Approx(ref["chi2"].get<double>()).epsilon(1e-9));
    // Draws: the columns of L (z = unit vectors) satisfy L L^T = K.
    const std::size_t m = 40;  // the first m points
    std::vector<double> Lm(m * m), z(n, 0.0), col(n);
    if (which == 0) REQUIRE(semi.compute(rot.semiseparable(), std::span(p.t).first(m), std::span(p.var).first(m),
                                         std::span(p.scale).first(m)).empty());
    else REQUIRE(dense.compute(qp, std::span(p.t).first(m), std::span(p.var).first(m), std::span(p.scale).first(m)).empty());
    for (std::size_t k = 0; k < m; ++k) {
      std::fill(z.begin(), z.end(), 0.0);
      z[k] = 1.0;
      if (which == 0) semi.draw(z, col);
      else dense.draw(z, col);
      for (std::size_t i = 0; i < m; ++i) Lm[i * m + k] = col[i];
    }
    double worst = 0.0, top = 0.0;
    for (std::size_t i = 0; i < m; ++i)
      for (std::size_t j = 0; j < m; ++j) {
        double llt = 0.0;
        for (std::size_t k = 0; k < m; ++k) llt += Lm[i * m + k] * Lm[j * m + k];
        const double kij = ref["K"][i * n + j].get<double>();
        worst = std::max(worst, std::abs(llt - kij));
        top = std::max(top, std::abs(kij));
      }
    CHECK(worst <= 1e-11 * top);
  }
}

TEST_CASE("gp: the semiseparable and dense solvers agree on the same kernel") {
  const Points p = make_points(400, 3, 250.0, 0.8);
  const RotationKernel rot{19.0, 3.0, 0.4, 0.0, 1.3};
  const SemiseparableKernel k = rot.semiseparable() + ExponentialKernel{1.0, 4.0}.semiseparable();
  SemiseparableGP semi;
  DenseGP dense;
  REQUIRE(semi.compute(k, p.t, p.var, p.scale).empty());
  REQUIRE(dense.compute([&](double tau) { return k.value(tau); }, p.t, p.var, p.scale).empty());
  CHECK(semi.log_likelihood(p.r) == doctest::Approx(dense.log_likelihood(p.r)).epsilon(1e-10));
  CHECK(semi.log_determinant() == doctest::Approx(dense.log_determinant()).epsilon(1e-10));
  // The one-pass call gives the same number and leaves the same factor.
  const double two_pass = semi.log_likelihood(p.r);
  std::string msg = "unset";
  CHECK(semi.compute_log_likelihood(k, p.t, p.var, p.r, p.scale, &msg) == doctest::Approx(two_pass).epsilon(1e-14));
  CHECK(msg.empty());
  CHECK(semi.log_likelihood(p.r) == doctest::Approx(two_pass).epsilon(1e-14));
  CHECK(semi.compute_log_likelihood(k, p.t, p.var, std::span(p.r).first(3), p.scale, &msg) == -HUGE_VAL);
  CHECK(msg == "GP inputs: 400 times but 3 residuals");
  // Equal times (two instruments at one epoch) are allowed.
  std::vector<double> t = p.t;
  t[10] = t[11];
  REQUIRE(semi.compute(k, t, p.var).empty());
  REQUIRE(dense.compute([&](double tau) { return k.value(tau); }, t, p.var).empty());
  CHECK(semi.log_likelihood(p.r) == doctest::Approx(dense.log_likelihood(p.r)).epsilon(1e-10));
}

TEST_CASE("gp: bad inputs and parameters give one-line messages") {
  SemiseparableGP gp;
  const std::vector<double> t{1.0, 3.0, 2.0}, v{1.0, 1.0, 1.0}, v2{1.0, 1.0};
  const SemiseparableKernel k = OscillatorKernel{2.0, 10.0, 2.0}.semiseparable();
  CHECK(gp.compute(k, t, v) == "GP inputs: times must be sorted (time 2 = 2.000000 d comes before 3.000000 d)");
  CHECK_FALSE(gp.computed());
  CHECK(gp.compute(k, std::span(t).first(2), v) == "GP inputs: 2 times but 3 variances");
  CHECK(gp.compute(SemiseparableKernel{}, std::span(t).first(2), v2) == "GP kernel: it has no terms");
  // A kernel that is not positive definite (negative real term alone).
  const SemiseparableKernel bad{{{SemiseparableTerm::Form::kReal, -5.0, 0.0, 0.1, 0.0}}};
  const std::vector<double> ts{1.0, 2.0}, small{1.0, 1.0};
  CHECK(gp.compute(bad, ts, small).rfind("GP covariance is not positive definite (pivot 0", 0) == 0);

  CHECK(RotationKernel{}.Validate().empty());
  CHECK(RotationKernel{-3.0}.Validate() == "rotation_period_d = -3: must be > 0 d");
  RotationKernel r;
  r.mix = -0.1;
  CHECK(r.Validate() == "mix = -0.1: must be >= 0");
  r.mix = 0.0;  // the fundamental alone is allowed
  CHECK(r.Validate().empty());
  CHECK(OscillatorKernel{1.0, 5.0, 0.0}.Validate() == "quality = 0: must be > 0");
  CHECK(QuasiPeriodicKernel{1.0, std::nan(""), 3.0, 0.5}.Validate() == "evolution_timescale_d = nan: must be a finite number");
  CHECK(Matern32Kernel{1.0, 5.0, 0.0}.Validate() == "epsilon_per_d = 0: must be > 0 1/d");
  CHECK(to_string(parse_kernel_kind("rotation", "project.toml: noise.kernel")) == "rotation");
  CHECK_THROWS_WITH_AS(parse_kernel_kind("qp", "project.toml: noise.kernel"),
                       "project.toml: noise.kernel: unknown kernel 'qp'; expected one of rotation, sho, matern32, exp, quasi_periodic",
                       InputError);
  CHECK(kernel_parameters(KernelKind::kRotation).size() == 5);
  // Round trip through the parameter vector.
  const RotationKernel rr = RotationKernel::from_vector(RotationKernel{30.0, 2.0, 0.7, 1.5, 0.2}.to_vector());
  CHECK(rr.rotation_period_d == 30.0);
  CHECK(rr.mix == 0.2);
  DenseGP dense;
  CHECK(dense.compute(QuasiPeriodicKernel{0.0}, ts, small) == "quasi-periodic kernel: amplitude_ms = 0: must be > 0 m/s");
  MultiSeriesGP multi;
  CHECK(multi.compute(LatentQuasiPeriodic{}, {}) == "multi-series GP: no series");
}

}  // TEST_SUITE
