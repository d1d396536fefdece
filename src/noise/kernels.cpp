// Kernel parameter structs of gp_kernels.h: closed forms, semiseparable terms, parameter
// lists and validation. Formulas and their sources are in the header.
#include <cmath>
#include <limits>
#include <numbers>
#include <sstream>

#include "apsides/error.h"
#include "apsides/gp_kernels.h"

namespace apsides::gp {
namespace {

constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kPi = std::numbers::pi;

std::string format_value(double v) {
  std::ostringstream s;
  s.precision(10);
  s << v;
  return s.str();
}

// Q within this of 1/2 is the critical (Q = 1/2) oscillator.
constexpr double kCriticalBand = 1e-12;

void append_oscillator(double variance, double omega0, double q, SemiseparableKernel& out) {
  using Form = SemiseparableTerm::Form;
  if (std::abs(q - 0.5) < kCriticalBand) {
    // S0 omega0 (1 + omega0 tau) exp(-omega0 tau), S0 omega0 Q = variance, Q = 1/2.
    out.terms.push_back({Form::kCritical, variance, variance * omega0, omega0, 0.0});
  } else if (q > 0.5) {
    const double eta = std::sqrt(1.0 - 1.0 / (4.0 * q * q));
    out.terms.push_back({Form::kComplex, variance, variance / (2.0 * eta * q),
                         omega0 / (2.0 * q), eta * omega0});
  } else {
    // cosh(f x) + sinh(f x) / (2 f Q) = sum over +- of (1 +- 1/(2fQ)) / 2 exp(+- f x).
    const double f = std::sqrt(1.0 / (4.0 * q * q) - 1.0);
    const double g = 1.0 / (2.0 * f * q);
    out.terms.push_back({Form::kReal, 0.5 * variance * (1.0 + g), 0.0,
                         omega0 * (1.0 / (2.0 * q) - f), 0.0});
    out.terms.push_back({Form::kReal, 0.5 * variance * (1.0 - g), 0.0,
                         omega0 * (1.0 / (2.0 * q) + f), 0.0});
  }
}

// Helpers for the vector round trip of each struct.
double at(std::span<const double> v, std::size_t i) { return i < v.size() ? v[i] : std::nan(""); }

}  // namespace

std::string validate_parameters(const std::vector<ParameterInfo>& params,
                                std::span<const double> values, const std::string& prefix) {
  if (values.size() != params.size())
    return prefix + "parameters: expected " + std::to_string(params.size()) + " values, got " +
           std::to_string(values.size());
  for (std::size_t i = 0; i < params.size(); ++i) {
    const ParameterInfo& p = params[i];
    const double v = values[i];
    const std::string head = prefix + p.name + " = " + format_value(v) + ": must be ";
    const std::string unit = p.unit.empty() ? "" : " " + p.unit;
    if (!std::isfinite(v)) return head + "a finite number";
    const bool below = p.lower_open ? !(v > p.lower) : !(v >= p.lower);
    if (below || v > p.upper) {
      std::string rule = (p.lower_open ? "> " : ">= ") + format_value(p.lower) + unit;
      if (std::isfinite(p.upper)) rule += " and <= " + format_value(p.upper) + unit;
      return head + rule;
    }
  }
  return "";
}

// ----- SemiseparableTerm / SemiseparableKernel -----

double SemiseparableTerm::value(double tau) const {
  tau = std::abs(tau);
  const double e = std::exp(-c * tau);
  switch (form) {
    case Form::kReal: return a * e;
    case Form::kComplex: return e * (a * std::cos(d * tau) + b * std::sin(d * tau));
    case Form::kCritical: return e * (a + b * tau);
  }
  return 0.0;
}

int SemiseparableKernel::width() const {
  int j = 0;
  for (const auto& t : terms) j += t.width();
  return j;
}

double SemiseparableKernel::value(double tau) const {
  double k = 0.0;
  for (const auto& t : terms) k += t.value(tau);
  return k;
}

SemiseparableKernel& SemiseparableKernel::operator+=(const SemiseparableKernel& other) {
  terms.insert(terms.end(), other.terms.begin(), other.terms.end());
  return *this;
}

SemiseparableKernel operator+(SemiseparableKernel lhs, const SemiseparableKernel& rhs) {
  lhs += rhs;
  return lhs;
}

// ----- OscillatorKernel -----

const std::vector<ParameterInfo>& OscillatorKernel::parameters() {
  static const std::vector<ParameterInfo> p{
      {"amplitude_ms", "m/s", 0.0, kInf, true, "standard deviation sqrt(k(0)) of the process"},
      {"period_d", "d", 0.0, kInf, true, "undamped period 2 pi / omega0"},
      {"quality", "", 0.0, kInf, true, "quality factor Q (> 1/2: oscillating, <= 1/2: damped)"}};
  return p;
}
std::vector<double> OscillatorKernel::to_vector() const { return {amplitude_ms, period_d, quality}; }
OscillatorKernel OscillatorKernel::from_vector(std::span<const double> v) {
  return {at(v, 0), at(v, 1), at(v, 2)};
}
std::string OscillatorKernel::Validate() const { return validate_parameters(parameters(), to_vector()); }

double OscillatorKernel::omega0() const { return 2.0 * kPi / period_d; }
double OscillatorKernel::s0() const { return amplitude_ms * amplitude_ms / (omega0() * quality); }

double OscillatorKernel::value(double tau) const {
  // The closed form of Foreman-Mackey et al. 2017 Eq. (23), case by case (not the terms),
  // so that tests can hold the terms against it.
  const double w0 = omega0(), q = quality;
  const double x = w0 * std::abs(tau);
  const double pre = s0() * w0 * q * std::exp(-x / (2.0 * q));
  if (std::abs(q - 0.5) < kCriticalBand) return pre * (1.0 + x);
  if (q > 0.5) {
    const double eta = std::sqrt(1.0 - 1.0 / (4.0 * q * q));
    return pre * (std::cos(eta * x) + std::sin(eta * x) / (2.0 * eta * q));
  }
  const double f = std::sqrt(1.0 / (4.0 * q * q) - 1.0);
  return pre * (std::cosh(f * x) + std::sinh(f * x) / (2.0 * f * q));
}

double OscillatorKernel::power(double omega) const {
  const double w0 = omega0(), q = quality;
  const double w2 = omega * omega, w02 = w0 * w0;
  return std::sqrt(2.0 / kPi) * s0() * w02 * w02 /
         ((w2 - w02) * (w2 - w02) + w02 * w2 / (q * q));
}

SemiseparableKernel OscillatorKernel::semiseparable() const {
  SemiseparableKernel k;
  append_oscillator(amplitude_ms * amplitude_ms, omega0(), quality, k);
  return k;
}

// ----- ExponentialKernel -----

const std::vector<ParameterInfo>& ExponentialKernel::parameters() {
  static const std::vector<ParameterInfo> p{
      {"amplitude_ms", "m/s", 0.0, kInf, true, "standard deviation sqrt(k(0))"},
      {"timescale_d", "d", 0.0, kInf, true, "e-folding time of the correlation"}};
  return p;
}
std::vector<double> ExponentialKernel::to_vector() const { return {amplitude_ms, timescale_d}; }
ExponentialKernel ExponentialKernel::from_vector(std::span<const double> v) { return {at(v, 0), at(v, 1)}; }
std::string ExponentialKernel::Validate() const { return validate_parameters(parameters(), to_vector()); }
double ExponentialKernel::value(double tau) const {
  return amplitude_ms * amplitude_ms * std::exp(-std::abs(tau) / timescale_d);
}
SemiseparableKernel ExponentialKernel::semiseparable() const {
  return {{{SemiseparableTerm::Form::kReal, amplitude_ms * amplitude_ms, 0.0, 1.0 / timescale_d, 0.0}}};
}

// ----- Matern32Kernel -----

const std::vector<ParameterInfo>& Matern32Kernel::parameters() {
  static const std::vector<ParameterInfo> p{
      {"amplitude_ms", "m/s", 0.0, kInf, true, "standard deviation sqrt(k(0))"},
      {"timescale_d", "d", 0.0, kInf, true, "length scale rho"},
      {"epsilon_per_d", "1/d", 0.0, kInf, true,
       "frequency of the epsilon approximation (keep << sqrt(3) / rho)"}};
  return p;
}
std::vector<double> Matern32Kernel::to_vector() const { return {amplitude_ms, timescale_d, epsilon_per_d}; }
Matern32Kernel Matern32Kernel::from_vector(std::span<const double> v) { return {at(v, 0), at(v, 1), at(v, 2)}; }
std::string Matern32Kernel::Validate() const { return validate_parameters(parameters(), to_vector()); }
double Matern32Kernel::value(double tau) const { return semiseparable().value(tau); }
double Matern32Kernel::exact_value(double tau) const {
  const double x = std::sqrt(3.0) * std::abs(tau) / timescale_d;
  return amplitude_ms * amplitude_ms * (1.0 + x) * std::exp(-x);
}
SemiseparableKernel Matern32Kernel::semiseparable() const {
  const double var = amplitude_ms * amplitude_ms;
  const double c = std::sqrt(3.0) / timescale_d;
  return {{{SemiseparableTerm::Form::kComplex, var, var * c / epsilon_per_d, c, epsilon_per_d}}};
}

// ----- RotationKernel -----

const std::vector<ParameterInfo>& RotationKernel::parameters() {
  static const std::vector<ParameterInfo> p{
      {"rotation_period_d", "d", 0.0, kInf, true, "rotation period P (kernel oscillates at P and P/2)"},
      {"amplitude_ms", "m/s", 0.0, kInf, true, "standard deviation sqrt(k(0)) of the activity signal"},
      {"quality", "", 0.0, kInf, true, "base quality Q0 of both modes (Q = 1/2 + Q0)"},
      {"quality_difference", "", 0.0, kInf, false, "extra quality dQ of the fundamental mode"},
      {"mix", "", 0.0, kInf, false, "variance of the P/2 mode relative to the P mode"}};
  return p;
}
std::vector<double> RotationKernel::to_vector() const {
  return {rotation_period_d, amplitude_ms, quality, quality_difference, mix};
}
RotationKernel RotationKernel::from_vector(std::span<const double> v) {
  return {at(v, 0), at(v, 1), at(v, 2), at(v, 3), at(v, 4)};
}
std::string RotationKernel::Validate() const { return validate_parameters(parameters(), to_vector()); }

OscillatorKernel RotationKernel::fundamental() const {
  const double q1 = 0.5 + quality + quality_difference;
  const double w1 = 4.0 * kPi * q1 / (rotation_period_d * std::sqrt(4.0 * q1 * q1 - 1.0));
  return {amplitude_ms / std::sqrt(1.0 + mix), 2.0 * kPi / w1, q1};
}
OscillatorKernel RotationKernel::harmonic() const {
  const double q2 = 0.5 + quality;
  const double w2 = 8.0 * kPi * q2 / (rotation_period_d * std::sqrt(4.0 * q2 * q2 - 1.0));
  return {amplitude_ms * std::sqrt(mix / (1.0 + mix)), 2.0 * kPi / w2, q2};
}
double RotationKernel::value(double tau) const {
  return fundamental().value(tau) + harmonic().value(tau);
}
SemiseparableKernel RotationKernel::semiseparable() const {
  return fundamental().semiseparable() + harmonic().semiseparable();
}

// ----- QuasiPeriodicKernel -----

const std::vector<ParameterInfo>& QuasiPeriodicKernel::parameters() {
  static const std::vector<ParameterInfo> p{
      {"amplitude_ms", "m/s", 0.0, kInf, true, "eta1, standard deviation sqrt(k(0))"},
      {"evolution_timescale_d", "d", 0.0, kInf, true, "eta2, lifetime of active regions"},
      {"period_d", "d", 0.0, kInf, true, "eta3, rotation period"},
      {"smoothness", "", 0.0, kInf, true, "eta4, width of the periodic part (small = sharp)"}};
  return p;
}
std::vector<double> QuasiPeriodicKernel::to_vector() const {
  return {amplitude_ms, evolution_timescale_d, period_d, smoothness};
}
QuasiPeriodicKernel QuasiPeriodicKernel::from_vector(std::span<const double> v) {
  return {at(v, 0), at(v, 1), at(v, 2), at(v, 3)};
}
std::string QuasiPeriodicKernel::Validate() const { return validate_parameters(parameters(), to_vector()); }
double QuasiPeriodicKernel::value(double tau) const {
  const double s = std::sin(kPi * tau / period_d);
  return amplitude_ms * amplitude_ms *
         std::exp(-tau * tau / (2.0 * evolution_timescale_d * evolution_timescale_d) -
                  s * s / (2.0 * smoothness * smoothness));
}

// ----- LatentQuasiPeriodic -----

const std::vector<ParameterInfo>& LatentQuasiPeriodic::parameters() {
  static const std::vector<ParameterInfo> p{
      {"evolution_timescale_d", "d", 0.0, kInf, true, "l_e, lifetime of active regions"},
      {"period_d", "d", 0.0, kInf, true, "P, rotation period"},
      {"smoothness", "", 0.0, kInf, true, "l_p, width of the periodic part (small = sharp)"}};
  return p;
}
std::vector<double> LatentQuasiPeriodic::to_vector() const {
  return {evolution_timescale_d, period_d, smoothness};
}
LatentQuasiPeriodic LatentQuasiPeriodic::from_vector(std::span<const double> v) {
  return {at(v, 0), at(v, 1), at(v, 2)};
}
std::string LatentQuasiPeriodic::Validate() const { return validate_parameters(parameters(), to_vector()); }

LatentQuasiPeriodic::Value LatentQuasiPeriodic::value(double tau) const {
  const double le2 = evolution_timescale_d * evolution_timescale_d;
  const double lp2 = smoothness * smoothness;
  const double P = period_d;
  const double x = 2.0 * kPi * tau / P;
  const double s = std::sin(0.5 * x);
  const double g = -tau * tau / (2.0 * le2) - s * s / (2.0 * lp2);
  const double g1 = -tau / le2 - kPi * std::sin(x) / (2.0 * P * lp2);
  const double g2 = -1.0 / le2 - kPi * kPi * std::cos(x) / (P * P * lp2);
  const double gamma = std::exp(g);
  return {gamma, gamma * g1, gamma * (g2 + g1 * g1)};
}

// ----- kinds -----

std::string to_string(KernelKind kind) {
  switch (kind) {
    case KernelKind::kRotation: return "rotation";
    case KernelKind::kOscillator: return "sho";
    case KernelKind::kMatern32: return "matern32";
    case KernelKind::kExponential: return "exp";
    case KernelKind::kQuasiPeriodic: return "quasi_periodic";
  }
  return "?";
}

KernelKind parse_kernel_kind(const std::string& text, const std::string& where) {
  for (KernelKind k : {KernelKind::kRotation, KernelKind::kOscillator, KernelKind::kMatern32,
                       KernelKind::kExponential, KernelKind::kQuasiPeriodic})
    if (text == to_string(k)) return k;
  throw InputError(where + ": unknown kernel '" + text +
                   "'; expected one of rotation, sho, matern32, exp, quasi_periodic");
}

const std::vector<ParameterInfo>& kernel_parameters(KernelKind kind) {
  switch (kind) {
    case KernelKind::kRotation: return RotationKernel::parameters();
    case KernelKind::kOscillator: return OscillatorKernel::parameters();
    case KernelKind::kMatern32: return Matern32Kernel::parameters();
    case KernelKind::kExponential: return ExponentialKernel::parameters();
    case KernelKind::kQuasiPeriodic: return QuasiPeriodicKernel::parameters();
  }
  return RotationKernel::parameters();
}

}  // namespace apsides::gp
