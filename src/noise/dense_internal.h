// Internal: what the three GP solvers share: input checks, the dense Cholesky core of
// DenseGP and MultiSeriesGP, and generalised least squares on top of any solve.
#pragma once

#include <Eigen/Cholesky>
#include <Eigen/Core>
#include <cstddef>
#include <functional>
#include <span>
#include <string>

#include "apsides/gp.h"

namespace apsides::gp::detail {

// "" or a message: sizes equal, values finite, variance >= 0, scale >= 0, and (when
// `sorted`) times non-decreasing.
std::string check_points(std::span<const double> t, std::span<const double> variance,
                         std::span<const double> scale, bool sorted);

using SolveFn = std::function<void(std::span<const double>, std::span<double>, std::size_t)>;
// beta = (A^T K^-1 A)^-1 A^T K^-1 y with A column-major n x m.
LinearSolution generalised_least_squares(std::size_t n, std::span<const double> design,
                                         std::size_t m, std::span<const double> y,
                                         const SolveFn& solve);

// Dense covariance, its Cholesky factor and the operations on it.
struct DenseCore {
  Eigen::MatrixXd K;                 // filled by the owner, then factor()
  Eigen::LLT<Eigen::MatrixXd> llt;
  double log_det = 0.0;
  bool ok = false;

  std::size_t size() const { return static_cast<std::size_t>(K.rows()); }
  // Factors K (lower triangle used): "" or "not positive definite".
  std::string factor();
  double log_likelihood(std::span<const double> r) const;
  void solve(std::span<const double> b, std::span<double> x, std::size_t n_rhs) const;
  void draw(std::span<const double> z, std::span<double> out) const;
  // cross(q, p) = cov(prediction q, data point p); prior(q) = its prior variance.
  Prediction predict(std::span<const double> r, std::size_t m,
                     const std::function<double(std::size_t, std::size_t)>& cross,
                     const std::function<double(std::size_t)>& prior, bool with_sd) const;
};

}  // namespace apsides::gp::detail
