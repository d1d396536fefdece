// The semiseparable ("celerite") Gaussian process of Foreman-Mackey, Agol, Ambikasaran &
// Angus 2017 (AJ 154, 220), section 5: the Cholesky factorization K = L D L^T of a
// semiseparable covariance in its pre-conditioned form (generators U, V bounded, the
// decays carried by phi_n = exp(-c (t_n - t_{n-1})) between neighbours), and the O(N J)
// sweeps built on it. Written from the paper's equations; the recursions are restated in
// gp.h. The hot loops are templates on the width J (1..4 fixed at compile time: the
// rotation kernel is J = 4), with J x J state on the stack and no allocation once the
// buffers have the size of the data.
#include <algorithm>
#include <array>
#include <cassert>
#include <cmath>
#include <limits>
#include <numbers>
#include <numeric>
#include <type_traits>

#include "apsides/gp.h"
#include "noise/dense_internal.h"
#include "noise/vector_math.h"

namespace apsides::gp {
namespace {

constexpr double kLog2Pi = 1.8378770664093453;  // ln(2 pi)
constexpr int kMax = SemiseparableGP::kMaxWidth;

template <class F>
decltype(auto) with_width(int j, F&& f) {
  switch (j) {
    case 1: return f(std::integral_constant<int, 1>{});
    case 2: return f(std::integral_constant<int, 2>{});
    case 3: return f(std::integral_constant<int, 3>{});
    case 4: return f(std::integral_constant<int, 4>{});
    default: return f(std::integral_constant<int, 0>{});
  }
}

std::string check_inputs(const SemiseparableKernel& kernel, std::span<const double> t,
                         std::span<const double> variance, std::span<const double> scale) {
  const int width = kernel.width();
  if (width < 1) return "GP kernel: it has no terms";
  if (width > SemiseparableGP::kMaxWidth)
    return "GP kernel: width " + std::to_string(width) + " exceeds the maximum " +
           std::to_string(SemiseparableGP::kMaxWidth);
  for (std::size_t i = 0; i < kernel.terms.size(); ++i) {
    const SemiseparableTerm& term = kernel.terms[i];
    if (!std::isfinite(term.a) || !std::isfinite(term.b) || !std::isfinite(term.c) ||
        !std::isfinite(term.d) || term.c < 0.0)
      return "GP kernel term " + std::to_string(i) + ": coefficients must be finite with c >= 0";
  }
  return detail::check_points(t, variance, scale, /*sorted=*/true);
}

}  // namespace

void SemiseparableGP::generators_at(double t, double s, double* u, double* v) const {
  const double tt = t - t0_;
  int k = 0;
  for (const SemiseparableTerm& term : kernel_.terms) {
    switch (term.form) {
      case SemiseparableTerm::Form::kReal:
        u[k] = s * term.a;
        v[k] = s;
        k += 1;
        break;
      case SemiseparableTerm::Form::kComplex: {
        const double cs = std::cos(term.d * tt), sn = std::sin(term.d * tt);
        u[k] = s * (term.a * cs + term.b * sn);
        v[k] = s * cs;
        u[k + 1] = s * (term.a * sn - term.b * cs);
        v[k + 1] = s * sn;
        k += 2;
        break;
      }
      case SemiseparableTerm::Form::kCritical:
        u[k] = s * (term.a + term.b * tt);
        v[k] = s;
        u[k + 1] = s * term.b;
        v[k + 1] = -s * tt;
        k += 2;
        break;
    }
  }
}

std::string SemiseparableGP::compute(const SemiseparableKernel& kernel, std::span<const double> t,
                                     std::span<const double> variance, std::span<const double> scale) {
  return compute_impl(kernel, t, variance, scale, nullptr, nullptr);
}

double SemiseparableGP::compute_log_likelihood(const SemiseparableKernel& kernel, std::span<const double> t,
                                               std::span<const double> variance,
                                               std::span<const double> residuals,
                                               std::span<const double> scale, std::string* message) {
  std::string msg;
  double quad = 0.0;
  if (residuals.size() != t.size())
    msg = "GP inputs: " + std::to_string(t.size()) + " times but " + std::to_string(residuals.size()) +
          " residuals";
  else
    msg = compute_impl(kernel, t, variance, scale, residuals.data(), &quad);
  if (message) *message = msg;
  if (!msg.empty()) return -std::numeric_limits<double>::infinity();
  return -0.5 * (quad + log_det_ + static_cast<double>(n_) * kLog2Pi);
}

std::string SemiseparableGP::compute_impl(const SemiseparableKernel& kernel, std::span<const double> t,
                                          std::span<const double> variance, std::span<const double> scale,
                                          const double* residuals, double* quad) {
  computed_ = false;
  if (std::string msg = check_inputs(kernel, t, variance, scale); !msg.empty()) return msg;
  kernel_ = kernel;
  n_ = t.size();
  j_ = kernel.width();
  const std::size_t n = n_, J = static_cast<std::size_t>(j_);
  t0_ = n ? t[0] : 0.0;
  k0_ = kernel.value(0.0);
  t_.assign(t.begin(), t.end());
  scale_.resize(n);
  diag_.resize(n);
  tmp1_.resize(n);
  tmp2_.resize(n);
  tmp3_.resize(n);
  u_.resize(n * J);
  v_.resize(n * J);
  w_.resize(n * J);
  phi_.resize(n * J);
  d_.resize(n);
  c_.resize(J);
  for (std::size_t i = 0; i < n; ++i) {
    scale_[i] = scale.empty() ? 1.0 : scale[i];
    diag_[i] = variance[i] + scale_[i] * scale_[i] * k0_;
    tmp3_[i] = t[i] - t0_;                  // t~_n
    tmp2_[i] = i ? t[i] - t[i - 1] : 0.0;   // Delta t_n
  }
  // Generators, column by column (written into row-major N x J).
  std::size_t k = 0;
  for (const SemiseparableTerm& term : kernel.terms) {
    detail::exp_decay(tmp2_.data(), n, term.c, tmp1_.data());
    const int wdt = term.width();
    for (int q = 0; q < wdt; ++q) {
      c_[k + q] = term.c;
      for (std::size_t i = 0; i < n; ++i) phi_[i * J + k + q] = tmp1_[i];
    }
    if (term.form == SemiseparableTerm::Form::kReal) {
      for (std::size_t i = 0; i < n; ++i) {
        u_[i * J + k] = scale_[i] * term.a;
        v_[i * J + k] = scale_[i];
      }
    } else if (term.form == SemiseparableTerm::Form::kComplex) {
      // tmp1_ = cos, w_ column as a second scratch is not contiguous: reuse d_ for sin.
      detail::cos_sin(tmp3_.data(), n, term.d, tmp1_.data(), d_.data());
      for (std::size_t i = 0; i < n; ++i) {
        const double s = scale_[i], cs = tmp1_[i], sn = d_[i];
        u_[i * J + k] = s * (term.a * cs + term.b * sn);
        v_[i * J + k] = s * cs;
        u_[i * J + k + 1] = s * (term.a * sn - term.b * cs);
        v_[i * J + k + 1] = s * sn;
      }
    } else {
      for (std::size_t i = 0; i < n; ++i) {
        const double s = scale_[i], tt = tmp3_[i];
        u_[i * J + k] = s * (term.a + term.b * tt);
        v_[i * J + k] = s;
        u_[i * J + k + 1] = s * term.b;
        v_[i * J + k + 1] = -s * tt;
      }
    }
    k += static_cast<std::size_t>(wdt);
  }
  std::size_t bad = 0;
  const bool ok =
      with_width(j_, [&](auto jc) { return factor<decltype(jc)::value>(bad, residuals, quad); });
  if (!ok)
    return "GP covariance is not positive definite (pivot " + std::to_string(bad) +
           " at t = " + std::to_string(t[bad]) + " d is not > 0)";
  log_det_ = detail::sum_log(d_.data(), n);
  computed_ = true;
  return "";
}

// The paper's recursion, rewritten one step ahead to shorten the loop-carried chain
// (the algebra is exact; only the order of operations changes). With u~ = phi_n o U_n
// and S_{n-1}, Y_{n-1} = D_{n-1} W_{n-1} from the previous step:
//   S_n U_n     = phi_n o (S_{n-1} u~) + phi_n o Y_{n-1} (Y_{n-1} . u~) / D_{n-1}
//   U_n S_n U_n = u~ S_{n-1} u~ + (Y_{n-1} . u~)^2 / D_{n-1}
// so the products with S_{n-1} run while D_{n-1} is still being divided, and the chain
// from one pivot to the next is a multiply, a subtraction and a division. The forward
// sweep L z = r likewise: U_n . f_n = u~ . f_{n-1} + (u~ . W_{n-1}) z_{n-1}.
template <int kJ>
bool SemiseparableGP::factor(std::size_t& bad_index, const double* r, double* quad_out) {
  const int J = kJ > 0 ? kJ : j_;
  const std::size_t n = n_;
  if (n == 0) {
    if (quad_out) *quad_out = 0.0;
    return true;
  }
  constexpr int kCap = kJ > 0 ? kJ : kMax;
  std::array<double, kCap * kCap> S{};  // S_{n-1}, full symmetric
  std::array<double, kCap> ut{}, Sa{}, f{}, y_prev{};
  const double* U = u_.data();
  const double* V = v_.data();
  const double* Phi = phi_.data();
  double* W = w_.data();
  double* D = d_.data();
  // Point 0: S_0 = 0.
  D[0] = diag_[0];
  if (!(D[0] > 0.0) || !std::isfinite(D[0])) {
    bad_index = 0;
    return false;
  }
  double inv_prev = 1.0 / D[0];
  for (int a = 0; a < J; ++a) {
    y_prev[a] = V[a];
    W[a] = V[a] * inv_prev;
  }
  double z_prev = r ? r[0] : 0.0;
  double quad = z_prev * z_prev * inv_prev;
  for (std::size_t i = 1; i < n; ++i) {
    const double* u = U + i * J;
    const double* v = V + i * J;
    const double* phi = Phi + i * J;
    const double* wp = W + (i - 1) * J;
    double* w = W + i * J;
    for (int a = 0; a < J; ++a) ut[a] = phi[a] * u[a];
    double q = 0.0, p = 0.0, uf = 0.0, uw = 0.0;
    for (int a = 0; a < J; ++a) {
      double acc = 0.0;
      for (int b = 0; b < J; ++b) acc += S[a * J + b] * ut[b];
      Sa[a] = acc;
      q += ut[a] * acc;
      p += y_prev[a] * ut[a];
      uf += ut[a] * f[a];
      uw += ut[a] * wp[a];
    }
    const double pinv = p * inv_prev;
    const double dn = diag_[i] - q - p * pinv;
    // S_{n-1} -> S_n (needs only the previous pivot).
    for (int a = 0; a < J; ++a) {
      const double ya = y_prev[a] * inv_prev;
      for (int b = 0; b < J; ++b) S[a * J + b] = phi[a] * phi[b] * (S[a * J + b] + ya * y_prev[b]);
    }
    if (!(dn > 0.0) || !std::isfinite(dn)) {
      bad_index = i;
      return false;
    }
    D[i] = dn;
    const double inv = 1.0 / dn;
    if (r) {
      const double z = r[i] - uf - uw * z_prev;
      for (int a = 0; a < J; ++a) f[a] = phi[a] * (f[a] + wp[a] * z_prev);
      quad += z * z * inv;
      z_prev = z;
    }
    for (int a = 0; a < J; ++a) {
      const double yn = v[a] - phi[a] * (Sa[a] + y_prev[a] * pinv);
      y_prev[a] = yn;
      w[a] = yn * inv;
    }
    inv_prev = inv;
  }
  if (quad_out) *quad_out = quad;
  return true;
}

// r^T K^-1 r = z^T D^-1 z with L z = r (the forward sweep alone, one step ahead as in
// factor()).
template <int kJ>
double SemiseparableGP::forward_quadratic(const double* r) const {
  const int J = kJ > 0 ? kJ : j_;
  std::array<double, (kJ > 0 ? kJ : kMax)> f{};
  const double* U = u_.data();
  const double* W = w_.data();
  const double* Phi = phi_.data();
  if (n_ == 0) return 0.0;
  double z_prev = r[0], quad = r[0] * r[0] / d_[0];
  for (std::size_t i = 1; i < n_; ++i) {
    const double* phi = Phi + i * J;
    const double* wp = W + (i - 1) * J;
    const double* u = U + i * J;
    double uf = 0.0, uw = 0.0;
    for (int a = 0; a < J; ++a) {
      const double ut = phi[a] * u[a];
      uf += ut * f[a];
      uw += ut * wp[a];
    }
    const double z = r[i] - uf - uw * z_prev;
    for (int a = 0; a < J; ++a) f[a] = phi[a] * (f[a] + wp[a] * z_prev);
    quad += z * z / d_[i];
    z_prev = z;
  }
  return quad;
}

double SemiseparableGP::log_likelihood(std::span<const double> r) const {
  assert(computed_ && r.size() == n_);
  const double quad =
      with_width(j_, [&](auto jc) { return forward_quadratic<decltype(jc)::value>(r.data()); });
  return -0.5 * (quad + log_det_ + static_cast<double>(n_) * kLog2Pi);
}

// Forward L z = b, then backward L^T x = D^-1 z, both one step ahead (see factor()):
// W_n . g_n = (W_n o phi_{n+1}) . g_{n+1} + ((W_n o phi_{n+1}) . U_{n+1}) x_{n+1}.
template <int kJ>
void SemiseparableGP::solve_one(const double* b, double* x) const {
  const int J = kJ > 0 ? kJ : j_;
  std::array<double, (kJ > 0 ? kJ : kMax)> f{};
  const double* U = u_.data();
  const double* W = w_.data();
  const double* Phi = phi_.data();
  const std::size_t n = n_;
  if (n == 0) return;
  double z_prev = b[0];
  x[0] = z_prev;
  for (std::size_t i = 1; i < n; ++i) {
    const double* phi = Phi + i * J;
    const double* wp = W + (i - 1) * J;
    const double* u = U + i * J;
    double uf = 0.0, uw = 0.0;
    for (int a = 0; a < J; ++a) {
      const double ut = phi[a] * u[a];
      uf += ut * f[a];
      uw += ut * wp[a];
    }
    const double z = b[i] - uf - uw * z_prev;
    for (int a = 0; a < J; ++a) f[a] = phi[a] * (f[a] + wp[a] * z_prev);
    x[i] = z;
    z_prev = z;
  }
  f.fill(0.0);  // g_{n+1}
  double x_next = x[n - 1] / d_[n - 1];
  x[n - 1] = x_next;
  for (std::size_t i = n - 1; i-- > 0;) {
    const double* phi = Phi + (i + 1) * J;
    const double* un = U + (i + 1) * J;
    const double* w = W + i * J;
    double wg = 0.0, wu = 0.0;
    for (int a = 0; a < J; ++a) {
      const double wt = w[a] * phi[a];
      wg += wt * f[a];
      wu += wt * un[a];
    }
    const double xi = x[i] / d_[i] - wg - wu * x_next;
    for (int a = 0; a < J; ++a) f[a] = phi[a] * (f[a] + un[a] * x_next);
    x[i] = xi;
    x_next = xi;
  }
}

void SemiseparableGP::solve(std::span<const double> b, std::span<double> x, std::size_t n_rhs) const {
  assert(computed_ && b.size() >= n_ * n_rhs && x.size() >= n_ * n_rhs);
  for (std::size_t col = 0; col < n_rhs; ++col)
    with_width(j_, [&](auto jc) {
      solve_one<decltype(jc)::value>(b.data() + col * n_, x.data() + col * n_);
    });
}

void SemiseparableGP::multiply(std::span<const double> x, std::span<double> y, std::size_t n_rhs) const {
  assert(computed_ && x.size() >= n_ * n_rhs && y.size() >= n_ * n_rhs);
  const std::size_t n = n_, J = static_cast<std::size_t>(j_);
  if (n == 0) return;
  std::array<double, kMax> f{};
  for (std::size_t col = 0; col < n_rhs; ++col) {
    const double* xc = x.data() + col * n;
    double* yc = y.data() + col * n;
    // Lower part: y_n += U_n . f_n, f_n = phi_n (f_{n-1} + V_{n-1} x_{n-1}).
    f.fill(0.0);
    for (std::size_t i = 0; i < n; ++i) {
      double acc = diag_[i] * xc[i];
      if (i > 0)
        for (std::size_t a = 0; a < J; ++a) {
          f[a] = phi_[i * J + a] * (f[a] + v_[(i - 1) * J + a] * xc[i - 1]);
          acc += u_[i * J + a] * f[a];
        }
      yc[i] = acc;
    }
    // Upper part: y_n += V_n . g_n, g_n = phi_{n+1} (g_{n+1} + U_{n+1} x_{n+1}).
    f.fill(0.0);
    for (std::size_t i = n - 1; i-- > 0;) {
      double acc = 0.0;
      for (std::size_t a = 0; a < J; ++a) {
        f[a] = phi_[(i + 1) * J + a] * (f[a] + u_[(i + 1) * J + a] * xc[i + 1]);
        acc += v_[i * J + a] * f[a];
      }
      yc[i] += acc;
    }
  }
}

void SemiseparableGP::draw(std::span<const double> z, std::span<double> out) const {
  assert(computed_ && z.size() >= n_ && out.size() >= n_);
  const std::size_t n = n_, J = static_cast<std::size_t>(j_);
  std::array<double, kMax> f{};
  double y_prev = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    const double y = std::sqrt(d_[i]) * z[i];
    double acc = y;
    if (i > 0)
      for (std::size_t a = 0; a < J; ++a) {
        f[a] = phi_[i * J + a] * (f[a] + w_[(i - 1) * J + a] * y_prev);
        acc += u_[i * J + a] * f[a];
      }
    out[i] = acc;
    y_prev = y;
  }
}

Prediction SemiseparableGP::predict(std::span<const double> r, std::span<const double> t_star,
                                    bool with_sd, std::span<const double> scale_star) const {
  assert(computed_ && r.size() == n_);
  assert(scale_star.empty() || scale_star.size() == t_star.size());
  const std::size_t n = n_, m = t_star.size(), J = static_cast<std::size_t>(j_);
  Prediction out;
  out.mean.assign(m, 0.0);
  if (n == 0) return out;
  std::vector<double> alpha(n);
  solve(r, alpha);
  std::vector<std::size_t> order(m);
  std::iota(order.begin(), order.end(), std::size_t{0});
  std::sort(order.begin(), order.end(), [&](std::size_t x, std::size_t y) { return t_star[x] < t_star[y]; });
  std::array<double, kMax> us{}, vs{}, F{};
  // Forward: data points with t_i <= t*. F(i) = phi_i F(i-1) + V_i alpha_i.
  std::size_t i = 0;  // next data point not yet in F
  for (std::size_t idx : order) {
    const double ts = t_star[idx];
    while (i < n && t_[i] <= ts) {
      for (std::size_t a = 0; a < J; ++a)
        F[a] = (i > 0 ? phi_[i * J + a] * F[a] : 0.0) + v_[i * J + a] * alpha[i];
      ++i;
    }
    if (i == 0) continue;
    generators_at(ts, scale_star.empty() ? 1.0 : scale_star[idx], us.data(), vs.data());
    double acc = 0.0;
    for (std::size_t a = 0; a < J; ++a) acc += us[a] * std::exp(-c_[a] * (ts - t_[i - 1])) * F[a];
    out.mean[idx] += acc;
  }
  // Backward: data points with t_i > t*. G(i) = U_i alpha_i + phi_{i+1} G(i+1).
  F.fill(0.0);
  std::size_t next = n;  // data points [next, n) are in F
  for (std::size_t o = m; o-- > 0;) {
    const std::size_t idx = order[o];
    const double ts = t_star[idx];
    while (next > 0 && t_[next - 1] > ts) {
      --next;
      for (std::size_t a = 0; a < J; ++a)
        F[a] = u_[next * J + a] * alpha[next] + (next + 1 < n ? phi_[(next + 1) * J + a] * F[a] : 0.0);
    }
    if (next == n) continue;
    generators_at(ts, scale_star.empty() ? 1.0 : scale_star[idx], us.data(), vs.data());
    double acc = 0.0;
    for (std::size_t a = 0; a < J; ++a) acc += vs[a] * std::exp(-c_[a] * (t_[next] - ts)) * F[a];
    out.mean[idx] += acc;
  }
  if (!with_sd) return out;
  // Variance: s*^2 k(0) - |D^-1/2 L^-1 k*|^2, one forward sweep per requested time.
  out.sd.assign(m, 0.0);
  std::vector<double> kstar(n);
  for (std::size_t q = 0; q < m; ++q) {
    const double ss = scale_star.empty() ? 1.0 : scale_star[q];
    for (std::size_t p = 0; p < n; ++p) kstar[p] = ss * scale_[p] * kernel_.value(t_star[q] - t_[p]);
    const double quad =
        with_width(j_, [&](auto jc) { return forward_quadratic<decltype(jc)::value>(kstar.data()); });
    out.sd[q] = std::sqrt(std::max(0.0, ss * ss * k0_ - quad));
  }
  return out;
}

LinearSolution SemiseparableGP::least_squares(std::span<const double> design, std::size_t n_columns,
                                              std::span<const double> y) const {
  return detail::generalised_least_squares(
      n_, design, n_columns, y,
      [this](std::span<const double> b, std::span<double> x, std::size_t k) { solve(b, x, k); });
}

}  // namespace apsides::gp
