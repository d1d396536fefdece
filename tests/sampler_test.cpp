#include "apsides/sampler.h"

#include <doctest/doctest.h>

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <vector>

namespace {

// Keeps the whole chain in memory (tests only).
struct Recorder : apsides::SamplerObserver {
  std::vector<std::vector<double>> positions;
  std::vector<std::vector<double>> log_prob;
  apsides::SamplerState last_state;
  long stop_at = -1;
  void on_step(long, std::span<const double> p, std::span<const double> lp) override {
    positions.emplace_back(p.begin(), p.end());
    log_prob.emplace_back(lp.begin(), lp.end());
  }
  void on_checkpoint(const apsides::SamplerState& s) override { last_state = s; }
  bool should_stop() override { return stop_at > 0 && static_cast<long>(positions.size()) >= stop_at; }
};

// A 10-dimensional Gaussian with correlations 0.9^|i-j| and scales 1 .. 10.
struct CorrelatedGaussian {
  Eigen::MatrixXd cov, precision;
  Eigen::VectorXd mean;
  explicit CorrelatedGaussian(int n) : cov(n, n), mean(n) {
    for (int i = 0; i < n; ++i) {
      mean(i) = 0.5 * i - 2.0;
      for (int j = 0; j < n; ++j) cov(i, j) = std::pow(0.9, std::abs(i - j)) * (1.0 + i) * (1.0 + j);
    }
    precision = cov.inverse();
  }
  double operator()(std::span<const double> x) const {
    Eigen::Map<const Eigen::VectorXd> v(x.data(), static_cast<long>(x.size()));
    const Eigen::VectorXd d = v - mean;
    return -0.5 * d.dot(precision * d);
  }
};

// Post-burn-in samples, as (draws x dim).
std::vector<std::vector<double>> kept_draws(const Recorder& rec, std::size_t dim, int walkers) {
  std::vector<std::vector<double>> out;
  for (std::size_t s = rec.positions.size() / 2; s < rec.positions.size(); ++s)
    for (int w = 0; w < walkers; ++w)
      out.emplace_back(rec.positions[s].begin() + static_cast<long>(w * dim),
                       rec.positions[s].begin() + static_cast<long>((w + 1) * dim));
  return out;
}

apsides::SamplerState start_at(const apsides::LogDensity& f, std::vector<double> center, double scale, int walkers) {
  apsides::SamplerState s;
  std::vector<double> sc(center.size(), scale);
  s.positions = apsides::initial_ball(f, center, sc, walkers, 99);
  return s;
}

}  // namespace

TEST_SUITE("sampler") {
  TEST_CASE("sampler: stretch factors have E[z] = 7/6 and median 1.125 for a = 2") {
    // Goodman & Weare 2010 (CHECKS.md section 5): g(z) ~ z^-1/2 on [1/2, 2].
    const int n = 400000;
    std::vector<double> z(n);
    double sum = 0.0;
    for (int i = 0; i < n; ++i) {
      z[static_cast<std::size_t>(i)] = apsides::stretch_z(apsides::sampler_uniform(3, i, i % 7, 4), 2.0);
      sum += z[static_cast<std::size_t>(i)];
    }
    std::nth_element(z.begin(), z.begin() + n / 2, z.end());
    // Standard deviation of z is 0.4249 (from g), so the mean's error is 7e-4.
    CHECK(sum / n == doctest::Approx(7.0 / 6.0).epsilon(3e-3));
    CHECK(z[n / 2] == doctest::Approx(1.125).epsilon(3e-3));
    CHECK(*std::min_element(z.begin(), z.end()) >= 0.5);
    CHECK(*std::max_element(z.begin(), z.end()) <= 2.0);
  }

  TEST_CASE("sampler: a 10-d correlated Gaussian has its known mean and covariance within Monte Carlo errors") {
    const int dim = 10, walkers = 40;
    const CorrelatedGaussian g(dim);
    const apsides::LogDensity f = [&](std::span<const double> x) { return g(x); };
    apsides::SamplerOptions opt;
    opt.walkers = walkers;
    opt.max_steps = 8000;
    opt.stop_when_converged = false;
    opt.seed = 11;
    std::vector<double> c(g.mean.data(), g.mean.data() + dim);
    Recorder rec;
    const auto res = apsides::run_sampler(f, dim, opt, start_at(f, c, 0.1, walkers), &rec);
    REQUIRE(res.termination != apsides::SamplerTermination::kFailed);
    CHECK(res.acceptance_fraction > 0.1);
    CHECK(res.rhat_max < 1.05);
    const auto draws = kept_draws(rec, dim, walkers);
    const double n = static_cast<double>(draws.size());
    Eigen::VectorXd m = Eigen::VectorXd::Zero(dim);
    for (const auto& d : draws) m += Eigen::Map<const Eigen::VectorXd>(d.data(), dim);
    m /= n;
    Eigen::MatrixXd cov = Eigen::MatrixXd::Zero(dim, dim);
    for (const auto& d : draws) {
      const Eigen::VectorXd v = Eigen::Map<const Eigen::VectorXd>(d.data(), dim) - m;
      cov += v * v.transpose();
    }
    cov /= n - 1;
    for (int i = 0; i < dim; ++i) {
      // Monte Carlo error of the mean: sigma / sqrt(ESS), ESS from our own diagnostics.
      const double ess = std::max(50.0, res.diagnostics[static_cast<std::size_t>(i)].ess_bulk);
      CHECK(std::abs(m(i) - g.mean(i)) < 4.0 * std::sqrt(g.cov(i, i) / ess));
      for (int j = 0; j <= i; ++j) {
        // Var of a sample covariance of Gaussians: (S_ii S_jj + S_ij^2) / ESS.
        const double se = std::sqrt((g.cov(i, i) * g.cov(j, j) + g.cov(i, j) * g.cov(i, j)) / ess);
        CHECK(std::abs(cov(i, j) - g.cov(i, j)) < 5.0 * se);
      }
    }
  }

  TEST_CASE("sampler: a banana target has its analytic moments within Monte Carlo errors") {
    // x1 ~ N(0, 1), x2 | x1 ~ N(b (x1^2 - 1), 1), b = 1: E[x2] = 0, Var x2 = 1 + 2 b^2 = 3,
    // Cov(x1, x2) = 0, Cov(x1^2, x2) = 2 b (moments of the normal distribution).
    const double b = 1.0;
    const apsides::LogDensity f = [&](std::span<const double> x) {
      const double r = x[1] - b * (x[0] * x[0] - 1.0);
      return -0.5 * (x[0] * x[0] + r * r);
    };
    apsides::SamplerOptions opt;
    opt.walkers = 32;
    opt.max_steps = 8000;
    opt.stop_when_converged = false;
    opt.seed = 5;
    Recorder rec;
    const auto res = apsides::run_sampler(f, 2, opt, start_at(f, {0.0, 0.0}, 0.1, 32), &rec);
    REQUIRE(res.termination != apsides::SamplerTermination::kFailed);
    const auto draws = kept_draws(rec, 2, 32);
    double m1 = 0, m2 = 0, v1 = 0, v2 = 0, c12 = 0;
    for (const auto& d : draws) {
      m1 += d[0];
      m2 += d[1];
    }
    const double n = static_cast<double>(draws.size());
    m1 /= n;
    m2 /= n;
    for (const auto& d : draws) {
      v1 += (d[0] - m1) * (d[0] - m1);
      v2 += (d[1] - m2) * (d[1] - m2);
      c12 += (d[0] * d[0] - 1.0) * d[1];
    }
    v1 /= n - 1;
    v2 /= n - 1;
    c12 /= n;
    const double ess = std::min(res.diagnostics[0].ess_bulk, res.diagnostics[1].ess_bulk);
    CHECK(std::abs(m1) < 4.0 / std::sqrt(ess));
    CHECK(std::abs(m2) < 4.0 * std::sqrt(3.0 / ess));
    CHECK(v1 == doctest::Approx(1.0).epsilon(6.0 * std::sqrt(2.0 / ess)));
    CHECK(v2 == doctest::Approx(3.0).epsilon(6.0 * std::sqrt(2.0 * 15.0 / 9.0 / ess)));
    CHECK(c12 == doctest::Approx(2.0 * b).epsilon(0.25));
  }

  TEST_CASE("sampler: chains are bitwise identical with 1 and 2 threads, and after a resume") {
    const CorrelatedGaussian g(4);
    const apsides::LogDensity f = [&](std::span<const double> x) { return g(x); };
    apsides::SamplerOptions opt;
    opt.walkers = 16;
    opt.max_steps = 600;
    opt.min_steps = 100;
    opt.check_every_steps = 100;
    opt.checkpoint_steps = 50;
    opt.diagnostic_rows = 64;  // forces thinning inside the run
    opt.ess_target = 1e9;      // never converges: the run goes to max_steps
    opt.seed = 123;
    const std::vector<double> c(g.mean.data(), g.mean.data() + 4);
    const apsides::SamplerState s0 = start_at(f, c, 0.5, 16);

    opt.threads = 1;
    Recorder one;
    const auto r1 = apsides::run_sampler(f, 4, opt, s0, &one);
    opt.threads = 2;
    Recorder two;
    const auto r2 = apsides::run_sampler(f, 4, opt, s0, &two);
    CHECK(one.positions == two.positions);
    CHECK(one.log_prob == two.log_prob);
    CHECK(r1.rhat_max == r2.rhat_max);

    // Interrupt at step 250 (checkpoint state saved), then resume to 600.
    Recorder first;
    first.stop_at = 250;
    const auto ra = apsides::run_sampler(f, 4, opt, s0, &first);
    CHECK(ra.termination == apsides::SamplerTermination::kInterrupted);
    REQUIRE(first.last_state.step == 250);
    std::vector<std::vector<double>> rows;
    for (long s : apsides::diagnostic_steps(250, opt.diagnostic_rows))
      rows.push_back(first.positions[static_cast<std::size_t>(s - 1)]);
    Recorder second;
    const auto rb = apsides::run_sampler(f, 4, opt, first.last_state, &second, &rows);
    std::vector<std::vector<double>> joined = first.positions;
    joined.insert(joined.end(), second.positions.begin(), second.positions.end());
    CHECK(joined == two.positions);
    CHECK(rb.rhat_max == r2.rhat_max);
    CHECK(rb.termination == apsides::SamplerTermination::kMaxSteps);
    CHECK(rb.message.find("WARNING: not converged") != std::string::npos);
  }

  TEST_CASE("sampler: stops by the convergence rule on an easy target") {
    const CorrelatedGaussian g(3);
    const apsides::LogDensity f = [&](std::span<const double> x) { return g(x); };
    apsides::SamplerOptions opt;
    opt.walkers = 16;
    opt.ess_target = 400;
    opt.max_steps = 50000;
    const std::vector<double> c(g.mean.data(), g.mean.data() + 3);
    const auto res = apsides::run_sampler(f, 3, opt, start_at(f, c, 0.5, 16));
    CHECK(res.converged());
    CHECK(res.steps < opt.max_steps);
    CHECK(res.rhat_max < 1.01);
    CHECK(res.ess_min >= 400);
    CHECK(static_cast<double>(res.steps - res.burn_in_steps) > 50 * res.tau_max);
  }

  TEST_CASE("sampler: bad options and non-finite starts are reported, not crashes") {
    apsides::SamplerOptions opt;
    opt.walkers = 7;
    CHECK(opt.Validate() == "walkers = 7: must be even and >= 4");
    opt.walkers = 8;
    const apsides::LogDensity f = [](std::span<const double> x) { return x[0] > 0 ? 0.0 : -INFINITY; };
    apsides::SamplerState s;
    s.positions.assign(8, -1.0);
    const auto res = apsides::run_sampler(f, 1, opt, s);
    CHECK(res.termination == apsides::SamplerTermination::kFailed);
    CHECK(apsides::initial_ball(f, std::vector<double>{-1.0}, std::vector<double>{0.1}, 8, 1).empty());
  }
}
