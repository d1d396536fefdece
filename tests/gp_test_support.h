// Shared by tests/gp_test.cpp and tests/gp_long_test.cpp: the numpy/scipy reference of
// the GP solvers (kernels written from the papers' formulas) and the test data.
#pragma once

#include <doctest/doctest.h>
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <nlohmann/json.hpp>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "apsides/gp.h"
#include "test_support.h"

namespace apsides::gp_test {
using namespace apsides::gp;
using nlohmann::json;


// The reference kernels in numpy, written from the formulas of the papers (each source
// beside its function), and the dense reference computations. Input: a JSON file of
// cases; output: one JSON document on stdout.
const char* const kReference = R"PY(
import json, sys
import numpy as np
from scipy.linalg import cho_factor, cho_solve

def sho(tau, S0, w0, Q):
    # Foreman-Mackey et al. 2017 (AJ 154, 220) Eq. (23), the three cases; Q = 1/2 is
    # the limit of the Q > 1/2 case (eta -> 0), which the quad test pins independently.
    x = w0 * np.abs(tau)
    pre = S0 * w0 * Q * np.exp(-x / (2 * Q))
    if Q == 0.5:
        return pre * (1 + x)
    if Q > 0.5:
        eta = np.sqrt(1 - 1 / (4 * Q * Q))
        return pre * (np.cos(eta * x) + np.sin(eta * x) / (2 * eta * Q))
    f = np.sqrt(1 / (4 * Q * Q) - 1)
    return pre * (np.cosh(f * x) + np.sinh(f * x) / (2 * f * Q))

def kernel(case, tau):
    k, p = case["kind"], case["params"]
    if k == "sho":  # amplitude sigma = sqrt(S0 w0 Q), period = 2 pi / w0
        w0 = 2 * np.pi / p["period_d"]
        return sho(tau, p["amplitude_ms"] ** 2 / (w0 * p["quality"]), w0, p["quality"])
    if k == "exp":
        return p["amplitude_ms"] ** 2 * np.exp(-np.abs(tau) / p["timescale_d"])
    if k == "matern32_eps":  # Foreman-Mackey et al. 2017 section 4.2, the eps form
        c, e, a = np.sqrt(3) / p["timescale_d"], p["epsilon_per_d"], p["amplitude_ms"] ** 2
        t = np.abs(tau)
        return a * np.exp(-c * t) * (np.cos(e * t) + c / e * np.sin(e * t))
    if k == "matern32_exact":
        x = np.sqrt(3) * np.abs(tau) / p["timescale_d"]
        return p["amplitude_ms"] ** 2 * (1 + x) * np.exp(-x)
    if k == "rotation":  # the double-SHO mapping stated in gp_kernels.h
        P, s2, f = p["rotation_period_d"], p["amplitude_ms"] ** 2, p["mix"]
        Q1 = 0.5 + p["quality"] + p["quality_difference"]
        w1 = 4 * np.pi * Q1 / (P * np.sqrt(4 * Q1 * Q1 - 1))
        Q2 = 0.5 + p["quality"]
        w2 = 8 * np.pi * Q2 / (P * np.sqrt(4 * Q2 * Q2 - 1))
        return sho(tau, s2 / ((1 + f) * w1 * Q1), w1, Q1) + sho(tau, f * s2 / ((1 + f) * w2 * Q2), w2, Q2)
    if k == "qp":  # Rajpaul et al. 2015 normalisation
        return p["amplitude_ms"] ** 2 * np.exp(-tau ** 2 / (2 * p["evolution_timescale_d"] ** 2)
                                               - np.sin(np.pi * tau / p["period_d"]) ** 2 / (2 * p["smoothness"] ** 2))
    raise ValueError(k)

def latent(p, tau):
    # gamma and its derivatives for the multi-series GP, closed form, each checked here
    # against a complex-step (first) and central differences (second) before use.
    le, P, lp = p["evolution_timescale_d"], p["period_d"], p["smoothness"]
    g = lambda x: np.exp(-x ** 2 / (2 * le ** 2) - np.sin(np.pi * x / P) ** 2 / (2 * lp ** 2))
    gam = g(tau)
    d1 = -tau / le ** 2 - np.pi * np.sin(2 * np.pi * tau / P) / (2 * P * lp ** 2)
    d2 = -1 / le ** 2 - np.pi ** 2 * np.cos(2 * np.pi * tau / P) / (P ** 2 * lp ** 2)
    first = gam * d1
    second = gam * (d2 + d1 ** 2)
    x = np.linspace(-3 * P, 3 * P, 37)
    h = 1e-20
    cs = np.imag(g(x + 1j * h)) / h
    assert np.allclose(cs, np.exp(-x ** 2 / (2 * le ** 2) - np.sin(np.pi * x / P) ** 2 / (2 * lp ** 2))
                       * (-x / le ** 2 - np.pi * np.sin(2 * np.pi * x / P) / (2 * P * lp ** 2)), rtol=1e-12, atol=1e-14)
    e = 1e-4
    fd2 = (np.imag(g(x + e + 1j * h)) - np.imag(g(x - e + 1j * h))) / (2 * e * h)
    ex = g(x) * ((-1 / le ** 2 - np.pi ** 2 * np.cos(2 * np.pi * x / P) / (P ** 2 * lp ** 2))
                 + (-x / le ** 2 - np.pi * np.sin(2 * np.pi * x / P) / (2 * P * lp ** 2)) ** 2)
    assert np.allclose(fd2, ex, rtol=1e-6, atol=1e-8 * np.max(np.abs(ex)))
    return gam, first, second

def covariance(case):
    if case["kind"] == "multi":
        p = case["params"]
        t = np.concatenate([s["t"] for s in case["series"]])
        a = np.concatenate([[s["alpha"]] * len(s["t"]) for s in case["series"]])
        b = np.concatenate([[s["beta"]] * len(s["t"]) for s in case["series"]])
        var = np.concatenate([s["var"] for s in case["series"]])
        tau = t[:, None] - t[None, :]
        gam, first, second = latent(p, tau)
        K = (np.outer(a, a) * gam + (np.outer(b, a) - np.outer(a, b)) * first - np.outer(b, b) * second)
        return K + np.diag(var)
    t = np.array(case["t"])
    s = np.array(case["scale"]) if case.get("scale") else np.ones_like(t)
    K = np.outer(s, s) * kernel(case, t[:, None] - t[None, :])
    return K + np.diag(case["var"])

def lnlike(K, r):
    c = cho_factor(K, lower=True)
    return float(-0.5 * r @ cho_solve(c, r) - np.sum(np.log(np.diag(c[0]))) - 0.5 * len(r) * np.log(2 * np.pi))

def run(case):
    task = case["task"]
    if task == "lnlike":
        return lnlike(covariance(case), np.array(case["r"]))
    if task == "dense_ops":  # solve, K x, prediction, GLS, for a stationary kernel
        t, r = np.array(case["t"]), np.array(case["r"])
        s = np.array(case["scale"]) if case.get("scale") else np.ones_like(t)
        K = covariance(case)
        B = np.array(case["B"]).reshape(case["nrhs"], len(t)).T
        ts, ss = np.array(case["t_star"]), np.array(case["scale_star"])
        Ks = np.outer(ss, s) * kernel(case, ts[:, None] - t[None, :])
        mean = Ks @ np.linalg.solve(K, r)
        var = ss ** 2 * kernel(case, 0.0) - np.einsum("ij,ji->i", Ks, np.linalg.solve(K, Ks.T))
        A = np.array(case["A"]).reshape(case["ncols"], len(t)).T
        KiA, Kiy = np.linalg.solve(K, A), np.linalg.solve(K, r)
        N = A.T @ KiA
        beta = np.linalg.solve(N, A.T @ Kiy)
        return {"solve": np.linalg.solve(K, B).T.ravel().tolist(), "Kx": (K @ B).T.ravel().tolist(),
                "mean": mean.tolist(), "sd": np.sqrt(np.maximum(var, 0)).tolist(), "K": K.ravel().tolist(),
                "beta": beta.tolist(), "cov": np.linalg.inv(N).ravel().tolist(),
                "logdetN": float(np.linalg.slogdet(N)[1]),
                "chi2": float((r - A @ beta) @ np.linalg.solve(K, r - A @ beta))}
    raise ValueError(task)

cases = json.load(open(sys.argv[1]))
print(json.dumps([run(c) for c in cases]))
)PY";

inline json run_reference(const json& cases, const std::string& name) {
  const std::string dir = test::temp_dir("gp-" + name);
  test::write_text(dir, "reference.py", kReference);
  const std::string input = test::write_text(dir, "cases.json", cases.dump());
  const auto res = test::run_command("/usr/bin/python3 " + dir + "/reference.py " + input, false);
  REQUIRE_MESSAGE(res.status == 0, res.output);
  return json::parse(res.output);
}

struct Points {
  std::vector<double> t, var, r, scale;
};

// Sorted random times over `baseline` days, stated errors 1-2 m/s plus a jitter, two
// instruments alternating (scale 1 and `second_scale`), residuals a sinusoid plus noise.
inline Points make_points(std::size_t n, unsigned seed, double baseline = 400.0, double second_scale = 1.0) {
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(0.0, baseline);
  std::normal_distribution<double> g(0.0, 1.0);
  Points p;
  for (std::size_t i = 0; i < n; ++i) p.t.push_back(u(rng) - 0.5 * baseline + 1234.5);
  std::sort(p.t.begin(), p.t.end());
  for (std::size_t i = 0; i < n; ++i) {
    const double sigma = 1.0 + std::abs(std::sin(0.37 * static_cast<double>(i)));
    const double jitter = i % 2 ? 0.8 : 1.5;
    p.var.push_back(sigma * sigma + jitter * jitter);
    p.r.push_back(4.0 * std::sin(2.0 * M_PI * p.t[i] / 27.0) + 2.0 * g(rng));
    p.scale.push_back(i % 2 ? second_scale : 1.0);
  }
  return p;
}

inline json params_json(const std::vector<ParameterInfo>& info, const std::vector<double>& values) {
  json p;
  for (std::size_t i = 0; i < info.size(); ++i) p[info[i].name] = values[i];
  return p;
}

// The semiseparable kernels under test, with the reference's name for each.
struct SemiCase {
  std::string label, kind;
  json params;
  SemiseparableKernel kernel;
};

inline std::vector<SemiCase> semiseparable_cases() {
  std::vector<SemiCase> out;
  for (double q : {3.0, 0.5, 0.3}) {
    const OscillatorKernel k{4.0, 20.0, q};
    out.push_back({fmt::format("sho Q = {}", q), "sho", params_json(k.parameters(), k.to_vector()),
                   k.semiseparable()});
  }
  const ExponentialKernel e{3.0, 15.0};
  out.push_back({"exp", "exp", params_json(e.parameters(), e.to_vector()), e.semiseparable()});
  const Matern32Kernel m{3.0, 12.0, 0.01};
  out.push_back({"matern32", "matern32_eps", params_json(m.parameters(), m.to_vector()), m.semiseparable()});
  const RotationKernel rot{27.0, 5.0, 1.2, 2.0, 0.6};
  out.push_back({"rotation", "rotation", params_json(rot.parameters(), rot.to_vector()), rot.semiseparable()});
  return out;
}

inline double rel_err(double a, double b) { return std::abs(a - b) / std::abs(b); }

// ln L of every kernel (SHO Q > 1/2, = 1/2, < 1/2, exp, Matern-3/2, rotation with and
// without per-instrument amplitudes, quasi-periodic, multi-series) at each size against
// numpy + scipy.linalg.cho_factor of the same matrix: relative error <= 1e-8.
inline void check_lnlike_against_scipy(const std::vector<std::size_t>& sizes, const std::string& name) {
  json cases = json::array();
  std::vector<double> ours;
  std::vector<std::string> labels;
  SemiseparableGP gp;  // one workspace reused across all sizes and kernels
  for (std::size_t n : sizes) {
    const Points p = make_points(n, 1000 + n, 400.0, 0.7);
    for (const SemiCase& c : semiseparable_cases())
      for (bool scaled : {false, true}) {
        if (scaled && c.kind != "rotation" && c.kind != "sho") continue;
        const std::span<const double> scale = scaled ? std::span<const double>(p.scale) : std::span<const double>();
        const std::string msg = gp.compute(c.kernel, p.t, p.var, scale);
        REQUIRE_MESSAGE(msg.empty(), msg);
        ours.push_back(gp.log_likelihood(p.r));
        labels.push_back(fmt::format("{}{} N = {}", c.label, scaled ? " (per-instrument amplitude)" : "", n));
        json jc{{"task", "lnlike"}, {"kind", c.kind}, {"params", c.params}, {"t", p.t}, {"var", p.var}, {"r", p.r}};
        if (scaled) jc["scale"] = p.scale;
        cases.push_back(jc);
      }
    // Quasi-periodic, dense.
    const QuasiPeriodicKernel qp{5.0, 40.0, 27.0, 0.6};
    DenseGP dense;
    REQUIRE(dense.compute(qp, p.t, p.var).empty());
    ours.push_back(dense.log_likelihood(p.r));
    labels.push_back(fmt::format("quasi-periodic N = {}", n));
    cases.push_back({{"task", "lnlike"}, {"kind", "qp"}, {"params", params_json(qp.parameters(), qp.to_vector())},
                     {"t", p.t}, {"var", p.var}, {"r", p.r}});
    // Multi-series: velocities (a G + b G') and two indicators, n points in all.
    const LatentQuasiPeriodic lat{40.0, 27.0, 0.6};
    const std::size_t per = n / 3;
    std::vector<Points> parts{make_points(per, 7 * n), make_points(per, 7 * n + 1), make_points(n - 2 * per, 7 * n + 2)};
    const double coef[3][2] = {{3.0, 25.0}, {0.02, 0.0}, {1.5, -4.0}};
    std::vector<SeriesInput> series;
    json js = json::array();
    std::vector<double> r_all;
    for (int k = 0; k < 3; ++k) {
      series.push_back({parts[k].t, parts[k].var, coef[k][0], coef[k][1]});
      js.push_back({{"t", parts[k].t}, {"var", parts[k].var}, {"alpha", coef[k][0]}, {"beta", coef[k][1]}});
      r_all.insert(r_all.end(), parts[k].r.begin(), parts[k].r.end());
    }
    MultiSeriesGP multi;
    const std::string msg = multi.compute(lat, series);
    REQUIRE_MESSAGE(msg.empty(), msg);
    ours.push_back(multi.log_likelihood(r_all));
    labels.push_back(fmt::format("multi-series N = {}", n));
    cases.push_back({{"task", "lnlike"}, {"kind", "multi"}, {"params", params_json(lat.parameters(), lat.to_vector())},
                     {"series", js}, {"r", r_all}});
  }
  const json ref = run_reference(cases, name);
  REQUIRE(ref.size() == ours.size());
  for (std::size_t i = 0; i < ours.size(); ++i) {
    INFO(labels[i] << ": ours " << fmt::format("{:.15g}", ours[i]) << ", scipy " << fmt::format("{:.15g}", ref[i].get<double>()));
    CHECK(rel_err(ours[i], ref[i].get<double>()) <= 1e-8);
  }
}


}  // namespace apsides::gp_test
