// Covariance kernels of the Gaussian-process noise model (stellar activity), their
// parameters (names, units, valid ranges) and their semiseparable ("celerite") form.
// The solvers that use them are in gp.h.
//
// Units: times and lags tau in days, angular frequencies omega in rad/day, amplitudes in
// m/s (a kernel value k(tau) is a covariance in (m/s)^2). Nothing here depends on the
// time origin: every kernel is stationary, k depends on tau = |t - t'| only.
//
// Two families:
//  * Semiseparable kernels, sums of terms of the form
//        k(tau) = exp(-c tau) [a cos(d tau) + b sin(d tau)],   tau >= 0,
//    factored in O(N J^2) operations by the semiseparable Cholesky of Foreman-Mackey,
//    Agol, Ambikasaran & Angus 2017, AJ 154, 220 ("celerite"), J the total width of the
//    terms (SemiseparableGP in gp.h): OscillatorKernel (SHO), ExponentialKernel,
//    Matern32Kernel (the paper's epsilon approximation), RotationKernel (two SHOs).
//  * The quasi-periodic kernel (squared exponential x periodic), which is not
//    semiseparable: dense Cholesky, O(N^3) (DenseGP, MultiSeriesGP in gp.h).
//
// Every kernel struct is an aggregate of its physical parameters with documented
// defaults, a `Validate()` returning "" or "field = value: must be ...", the static list
// `parameters()` (name, unit, range, meaning, in the order of `to_vector()` /
// `from_vector()`) for building a parameter block, and `value(tau)`.
#pragma once

#include <span>
#include <string>
#include <vector>

namespace apsides::gp {

// One hyperparameter: name (also the key suffix the lead's parameter block uses), unit,
// valid range and whether the bounds themselves are allowed.
struct ParameterInfo {
  std::string name;
  std::string unit;       // "m/s", "d", "1/d" or "" (dimensionless)
  double lower = 0.0;     // valid range [lower, upper] (or open, see flags)
  double upper = 0.0;     // +inf when unbounded
  bool lower_open = true; // true: value must be > lower; false: >= lower
  std::string meaning;
};

// ---------------------------------------------------------------------------------------
// Semiseparable building block.
//
// One term of a semiseparable kernel, in one of three forms (tau >= 0):
//   kReal:     k(tau) = a exp(-c tau)                                   width 1
//   kComplex:  k(tau) = exp(-c tau) [a cos(d tau) + b sin(d tau)]       width 2
//   kCritical: k(tau) = exp(-c tau) [a + b tau]                         width 2
// kCritical is the exact limit d -> 0 (b d fixed) of kComplex, the SHO at Q = 1/2. Its
// generators are polynomial in t instead of trigonometric (see src/noise/semiseparable.cpp)
// and lose about (c T)^2 x machine epsilon, T the time span: ~1e-11 for c T ~ 300.
// a may be negative (the Q < 1/2 oscillator is a sum of two real terms, one negative);
// positive definiteness is a property of the whole sum, and the factorization reports
// a non-positive pivot as a failure.
struct SemiseparableTerm {
  enum class Form { kReal, kComplex, kCritical };
  Form form = Form::kReal;
  double a = 0.0;  // (m/s)^2
  double b = 0.0;  // (m/s)^2 (kComplex), (m/s)^2 / d (kCritical)
  double c = 0.0;  // decay rate, 1/d, >= 0
  double d = 0.0;  // angular frequency, rad/d (kComplex only)

  int width() const { return form == Form::kReal ? 1 : 2; }
  double value(double tau_days) const;
};

// A sum of terms; J = width() is the rank of the semiseparable part.
struct SemiseparableKernel {
  std::vector<SemiseparableTerm> terms;

  int width() const;
  double value(double tau_days) const;  // sum of the terms at |tau|
  SemiseparableKernel& operator+=(const SemiseparableKernel& other);
};
SemiseparableKernel operator+(SemiseparableKernel lhs, const SemiseparableKernel& rhs);

// ---------------------------------------------------------------------------------------
// Stochastically driven damped simple harmonic oscillator (SHO).
// Foreman-Mackey et al. 2017, section 4.1 (Eqs. 20-23 as we recall the numbering): the power spectrum
//   S(omega) = sqrt(2/pi) S0 omega0^4 / [(omega^2 - omega0^2)^2 + omega0^2 omega^2 / Q^2]
// and its Fourier transform in the paper's (unitary) convention,
//   k(tau) = (1 / sqrt(2 pi)) int S(omega) exp(i omega tau) d omega
//          = sqrt(2/pi) int_0^inf S(omega) cos(omega tau) d omega,
// which is, with x = omega0 tau:
//   Q > 1/2:  S0 omega0 Q exp(-x / (2Q)) [cos(eta x) + sin(eta x) / (2 eta Q)],
//             eta = sqrt(1 - 1/(4 Q^2))
//   Q = 1/2:  S0 omega0 Q exp(-x) (1 + x)            (the limit eta -> 0 of Q > 1/2)
//   Q < 1/2:  S0 omega0 Q exp(-x / (2Q)) [cosh(f x) + sinh(f x) / (2 f Q)],
//             f = sqrt(1/(4 Q^2) - 1).
// Parameterised here by the standard deviation sigma = sqrt(k(0)) = sqrt(S0 omega0 Q) and
// the undamped period 2 pi / omega0:
//   S0 = sigma^2 / (omega0 Q), omega0 = 2 pi / period_d.
// As terms: Q > 1/2 one kComplex term (a = sigma^2, b = sigma^2 / (2 eta Q),
// c = omega0 / (2Q), d = eta omega0); Q = 1/2 one kCritical term (a = sigma^2,
// b = sigma^2 omega0, c = omega0); Q < 1/2 two kReal terms
// (a = sigma^2 (1 +- 1/(2fQ)) / 2, c = omega0 (1/(2Q) -+ f)). Q exactly 1/2 is
// treated as the critical case only when |Q - 1/2| < 1e-12; just around it the
// kComplex / kReal coefficients grow like 1/eta and lose ~ 1/eta^2 digits, so
// choose Q's prior away from 1/2 or accept that loss.
struct OscillatorKernel {
  double amplitude_ms = 1.0;  // sigma = sqrt(k(0)), m/s, > 0
  double period_d = 10.0;     // 2 pi / omega0, days, > 0
  double quality = 1.0;       // Q, dimensionless, > 0

  std::string Validate() const;
  double omega0() const;  // rad/d
  double s0() const;      // S0, (m/s)^2 d
  double value(double tau_days) const;       // k(tau), closed form above
  double power(double omega_rad_d) const;    // S(omega), (m/s)^2 d
  SemiseparableKernel semiseparable() const;
  static const std::vector<ParameterInfo>& parameters();
  std::vector<double> to_vector() const;
  static OscillatorKernel from_vector(std::span<const double> values);
};

// Real exponential (Ornstein-Uhlenbeck) kernel: k(tau) = sigma^2 exp(-tau / timescale).
// One kReal term, a = sigma^2, c = 1 / timescale_d (Foreman-Mackey et al. 2017, Eq. 7
// with b = d = 0).
struct ExponentialKernel {
  double amplitude_ms = 1.0;  // sigma, m/s, > 0
  double timescale_d = 10.0;  // days, > 0

  std::string Validate() const;
  double value(double tau_days) const;
  SemiseparableKernel semiseparable() const;
  static const std::vector<ParameterInfo>& parameters();
  std::vector<double> to_vector() const;
  static ExponentialKernel from_vector(std::span<const double> values);
};

// Matern-3/2 kernel, k(tau) = sigma^2 (1 + sqrt(3) tau / rho) exp(-sqrt(3) tau / rho), in
// the epsilon approximation of Foreman-Mackey et al. 2017 (section 4.2): the kComplex term
//   k_eps(tau) = sigma^2 exp(-c tau) [cos(eps tau) + (c / eps) sin(eps tau)],
//   c = sqrt(3) / rho,
// i.e. a = sigma^2, b = sigma^2 c / eps, d = eps, which tends to the Matern-3/2 kernel as
// eps -> 0 (error ~ (eps / c)^2 relative, for eps << c). `value()` returns k_eps, the
// kernel the solver factors; `exact_value()` the Matern-3/2 limit.
struct Matern32Kernel {
  double amplitude_ms = 1.0;    // sigma, m/s, > 0
  double timescale_d = 10.0;    // rho, days, > 0
  double epsilon_per_d = 0.01;  // eps, rad/d, > 0; keep eps << sqrt(3) / rho

  std::string Validate() const;
  double value(double tau_days) const;
  double exact_value(double tau_days) const;
  SemiseparableKernel semiseparable() const;
  static const std::vector<ParameterInfo>& parameters();
  std::vector<double> to_vector() const;
  static Matern32Kernel from_vector(std::span<const double> values);
};

// Rotation kernel: an SHO at the rotation period plus an SHO at half of it, the
// "double SHO" form for rotationally modulated stellar activity (Perger et al. 2021,
// A&A 645, A58, section 2 -- form as we recall it, mapping below is ours and exact).
// Parameters: rotation period P, standard deviation sigma (k(0) = sigma^2), a base
// quality Q0, an extra quality dQ of the fundamental mode, and the mix f, the harmonic's
// share of the variance relative to the fundamental's. The two SHO terms
// (S0, Q, omega0) of OscillatorKernel's S(omega) are
//   fundamental: Q1 = 1/2 + Q0 + dQ,  omega1 = 4 pi Q1 / (P sqrt(4 Q1^2 - 1)),
//                S1 = sigma^2 / ((1 + f) omega1 Q1)
//   harmonic:    Q2 = 1/2 + Q0,       omega2 = 8 pi Q2 / (P sqrt(4 Q2^2 - 1)),
//                S2 = f sigma^2 / ((1 + f) omega2 Q2)
// so that both are underdamped (Q > 1/2), their kernels oscillate exactly at P and P/2
// (eta_j omega_j = 2 pi / P and 4 pi / P), the variances are sigma^2 / (1 + f) and
// f sigma^2 / (1 + f), and they decay at rates
//   c1 = 2 pi / (P sqrt(4 Q1^2 - 1)),  c2 = 4 pi / (P sqrt(4 Q2^2 - 1)):
// the two modes' damping is set by the shared base quality Q0 (equal decay RATES when
// 4 Q2^2 - 1 = 4 (4 Q1^2 - 1), not in general). As OscillatorKernels:
// {amplitude sigma / sqrt(1 + f), period 2 pi / omega1, Q1} and
// {amplitude sigma sqrt(f / (1 + f)), period 2 pi / omega2, Q2}. Width J = 4.
struct RotationKernel {
  double rotation_period_d = 25.0;  // P, days, > 0
  double amplitude_ms = 1.0;        // sigma, m/s, > 0
  double quality = 1.0;             // Q0, > 0
  double quality_difference = 1.0;  // dQ, >= 0
  double mix = 0.5;                 // f, >= 0 (0: fundamental alone)

  std::string Validate() const;
  OscillatorKernel fundamental() const;
  OscillatorKernel harmonic() const;
  double value(double tau_days) const;
  SemiseparableKernel semiseparable() const;
  static const std::vector<ParameterInfo>& parameters();
  std::vector<double> to_vector() const;
  static RotationKernel from_vector(std::span<const double> values);
};

// ---------------------------------------------------------------------------------------
// Quasi-periodic kernel (squared exponential x periodic), the activity kernel of
// Haywood et al. 2014, MNRAS 443, 2517, written in the normalisation of Rajpaul et al.
// 2015, MNRAS 452, 2269 (their section 2.2):
//   k(tau) = eta1^2 exp( -tau^2 / (2 eta2^2) - sin^2(pi tau / eta3) / (2 eta4^2) )
// eta1 amplitude (m/s), eta2 evolution timescale of the active regions (days), eta3 the
// rotation period (days), eta4 the smoothness of the periodic part (dimensionless; small
// eta4 = sharp, many harmonics). [From memory: Haywood et al. write
// exp(-tau^2/eta2'^2 - 2 sin^2(pi tau/eta3)/eta4'^2); ours equals it with
// eta2' = sqrt(2) eta2, eta4' = 2 eta4.] scikit-learn's ConstantKernel(eta1^2) *
// RBF(length_scale = eta2) * ExpSineSquared(length_scale = 2 eta4, periodicity = eta3)
// is the same function (tests/gp_test.cpp checks it). Not semiseparable: dense, O(N^3).
struct QuasiPeriodicKernel {
  double amplitude_ms = 1.0;            // eta1, m/s, > 0
  double evolution_timescale_d = 50.0;  // eta2, days, > 0
  double period_d = 25.0;               // eta3, days, > 0
  double smoothness = 0.5;              // eta4, dimensionless, > 0

  std::string Validate() const;
  double value(double tau_days) const;
  static const std::vector<ParameterInfo>& parameters();
  std::vector<double> to_vector() const;
  static QuasiPeriodicKernel from_vector(std::span<const double> values);
};

// The unit-variance quasi-periodic covariance gamma(tau) of the latent process G of the
// multi-dimensional GP (Rajpaul et al. 2015; gp.h: MultiSeriesGP), with its first and
// second derivatives in closed form. With g(tau) = -tau^2/(2 l_e^2) - sin^2(pi tau/P)/(2 l_p^2):
//   gamma   = exp(g)
//   gamma'  = gamma g',          g'  = -tau / l_e^2 - pi sin(2 pi tau / P) / (2 P l_p^2)
//   gamma'' = gamma (g'' + g'^2), g'' = -1 / l_e^2 - pi^2 cos(2 pi tau / P) / (P^2 l_p^2)
// (derivatives with respect to tau = t - t'; tests compare them with finite differences).
struct LatentQuasiPeriodic {
  double evolution_timescale_d = 50.0;  // l_e, days, > 0
  double period_d = 25.0;               // P, days, > 0
  double smoothness = 0.5;              // l_p, dimensionless, > 0

  std::string Validate() const;
  struct Value {
    double gamma = 0.0, first = 0.0, second = 0.0;  // gamma, d gamma / d tau, d2 gamma / d tau2
  };
  Value value(double tau_days) const;
  static const std::vector<ParameterInfo>& parameters();
  std::vector<double> to_vector() const;
  static LatentQuasiPeriodic from_vector(std::span<const double> values);
};

// Which kernel a noise term uses; the strings are the project file's `[noise] kernel`
// values ("rotation", "sho", "matern32", "exp", "quasi_periodic").
enum class KernelKind { kRotation, kOscillator, kMatern32, kExponential, kQuasiPeriodic };
std::string to_string(KernelKind kind);
// Throws InputError "<where>: unknown kernel '<text>'; expected one of ..." on a bad name.
KernelKind parse_kernel_kind(const std::string& text, const std::string& where);
// The parameter list of a kind (the matching struct's parameters()).
const std::vector<ParameterInfo>& kernel_parameters(KernelKind kind);

// Checks `values` against `params` (size, finiteness, ranges): "" or
// "<prefix><name> = <value>: must be ...". Used by every Validate().
std::string validate_parameters(const std::vector<ParameterInfo>& params,
                                std::span<const double> values, const std::string& prefix = "");

}  // namespace apsides::gp
