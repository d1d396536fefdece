// Symplectic correctors (Wisdom, Holman & Touma 1996, Fields Inst. Commun. 10, 217).
//
// For H = A + eps B and the drift–kick–drift kernel DKD = D(h/2) K(h) D(h/2), the map is
// the exact flow of H + eps sum_k c_{k+1} h^k ad_A^k B + O(eps^2), with the c's from the
// first-order (in eps) BCH expansion: (x / sinh x), x = ad_A h / 2, gives
// c2 = -1/24, c4 = 7/5760, c6 = -31/967680. A corrector C, a product of
// X(a, b) = D(a h) K(b h) D(-a h) (each a kick conjugated by drifts), chosen so that
// C^-1 DKD^n C is the true flow up to O(eps h^{2n+2}) + O(eps^2 h^2), removes those terms.
// WHT96 build C from Z(a, b) = X(a, -b) X(-a, b) with a_k = k alpha, alpha = sqrt(7/40),
// as   C = Z(a_n, b_n) ... Z(a_1, b_1) Z(-a_1, -b_1) ... Z(-a_n, -b_n)   (applied left
// first), whose inverse is the same product with b -> -b. Its odd moments are
// -4 sum_k b_k a_k^m and its even moments vanish, so the b's solve the linear system
//   sum_k b_k a_k^m = -m! c_{m+1} / 4,   m = 1, 3, ..., 2n - 1,
// which gives WHT96's published values, e.g. third order b_1 = 1/(96 alpha) =
// 0.02490059602779987, fifth order (b_1, b_2) = (0.04150099337966645, -0.00830019867593329)
// (tests/nbody_test.cpp checks them). Order 7 uses a_3 = 3 alpha likewise.
//
// Our kernel is kick–drift–kick. It is exactly conjugate to WHT96's: DKD = Q KDK Q^-1 with
// Q = D(-h/2) K(-h/2) (kick by -h/2, then drift by -h/2), so the KDK mapping coordinates are
// y = Q^-1 C x (apply C, drift h/2, kick h/2) and the real ones x = C^-1 Q y.
#include <array>
#include <cmath>
#include <utility>

#include "dynamics/wh_core.h"

namespace apsides::dynamics {

namespace {

struct Coefficients {
  int pairs = 0;
  std::array<double, 3> a{}, b{};
};

Coefficients solve_coefficients(int pairs) {
  Coefficients c;
  c.pairs = pairs;
  const double alpha = std::sqrt(7.0 / 40.0);
  // Right-hand sides -m! c_{m+1} / 4 for m = 1, 3, 5.
  const double rhs_all[3] = {1.0 / 96.0, -7.0 / 3840.0, 31.0 / 32256.0};
  double M[3][4] = {};
  for (int row = 0; row < pairs; ++row) {
    const int m = 2 * row + 1;
    for (int k = 0; k < pairs; ++k) M[row][k] = std::pow((k + 1) * alpha, m);
    M[row][pairs] = rhs_all[row];
  }
  // Gaussian elimination with partial pivoting (at most 3 x 3).
  for (int col = 0; col < pairs; ++col) {
    int piv = col;
    for (int row = col + 1; row < pairs; ++row)
      if (std::fabs(M[row][col]) > std::fabs(M[piv][col])) piv = row;
    for (int j = 0; j <= pairs; ++j) std::swap(M[col][j], M[piv][j]);
    for (int row = col + 1; row < pairs; ++row) {
      const double f = M[row][col] / M[col][col];
      for (int j = col; j <= pairs; ++j) M[row][j] -= f * M[col][j];
    }
  }
  for (int row = pairs - 1; row >= 0; --row) {
    double s = M[row][pairs];
    for (int j = row + 1; j < pairs; ++j) s -= M[row][j] * c.b[static_cast<std::size_t>(j)];
    c.b[static_cast<std::size_t>(row)] = s / M[row][row];
  }
  for (int k = 0; k < pairs; ++k) c.a[static_cast<std::size_t>(k)] = (k + 1) * alpha;
  return c;
}

const Coefficients& coefficients(int order) {
  static const std::array<Coefficients, 3> table = {solve_coefficients(1), solve_coefficients(2),
                                                    solve_coefficients(3)};
  return table[static_cast<std::size_t>((order - 3) / 2)];
}

// Applies the drift/kick sequence of C (sign = +1) or C^-1 (sign = -1), merging adjacent
// drifts.
class Sequencer {
 public:
  Sequencer(const WhSystem& sys, WhState& s, double h, WhFlags& flags) : sys_(sys), s_(s), h_(h), flags_(flags) {}
  void drift(double a) { pending_ += a; }
  void kick(double b) {
    flush();
    wh_kick(sys_, s_, b * h_, flags_);
  }
  void flush() {
    if (pending_ != 0.0) wh_drift(sys_, s_, pending_ * h_, flags_);
    pending_ = 0.0;
  }
  // Z(a, b) = D(a) K(-b) D(-2a) K(b) D(a).
  void z(double a, double b) {
    drift(a);
    kick(-b);
    drift(-2.0 * a);
    kick(b);
    drift(a);
  }

 private:
  const WhSystem& sys_;
  WhState& s_;
  double h_;
  WhFlags& flags_;
  double pending_ = 0.0;
};

void apply(const WhSystem& sys, WhState& s, double h, int order, double sign, WhFlags& flags) {
  const Coefficients& c = coefficients(order);
  Sequencer seq(sys, s, h, flags);
  for (int k = c.pairs - 1; k >= 0; --k) seq.z(c.a[static_cast<std::size_t>(k)], sign * c.b[static_cast<std::size_t>(k)]);
  for (int k = 0; k < c.pairs; ++k) seq.z(-c.a[static_cast<std::size_t>(k)], -sign * c.b[static_cast<std::size_t>(k)]);
  seq.flush();
}

}  // namespace

bool corrector_supported(int order) { return order == 3 || order == 5 || order == 7; }

int corrector_coefficients(int order, double* a, double* b) {
  if (!corrector_supported(order)) return 0;
  const Coefficients& c = coefficients(order);
  for (int k = 0; k < c.pairs; ++k) {
    a[k] = c.a[static_cast<std::size_t>(k)];
    b[k] = c.b[static_cast<std::size_t>(k)];
  }
  return c.pairs;
}

void corrector_to_mapping(const WhSystem& sys, WhState& s, double h, int order, WhFlags& flags) {
  if (!corrector_supported(order)) return;
  apply(sys, s, h, order, +1.0, flags);
  // Q^-1: drift h/2, then kick h/2.
  wh_drift(sys, s, 0.5 * h, flags);
  wh_kick(sys, s, 0.5 * h, flags);
}

void corrector_to_real(const WhSystem& sys, WhState& s, double h, int order, WhFlags& flags) {
  if (!corrector_supported(order)) return;
  // Q: kick -h/2, then drift -h/2.
  wh_kick(sys, s, -0.5 * h, flags);
  wh_drift(sys, s, -0.5 * h, flags);
  apply(sys, s, h, order, -1.0, flags);
}

}  // namespace apsides::dynamics
