// Kepler's equation M = E - e sin E and the anomalies of a Keplerian orbit.
//
// Accuracy: |E - E_true| <= 1e-12 rad for every e in [0, 0.999] and every M (any real
// value; M is reduced to [0, 2 pi) internally), including e -> 1 near periastron.
// Proved in tests/kepler_test.cpp against published examples (Meeus, Vallado) and a
// long-double reference.
#pragma once

#include <cmath>
#include <cstddef>
#include <span>

namespace apsides {

// Eccentric anomaly E (rad) for mean anomaly M (rad) and eccentricity 0 <= e < 1.
// Scalar, robust reference solver (Newton with a bracketing safeguard).
double solve_kepler(double mean_anomaly, double ecc);

// True anomaly nu (rad, in (-pi, pi]) from eccentric anomaly E.
double true_anomaly_from_eccentric(double eccentric_anomaly, double ecc);
// Eccentric anomaly from true anomaly (rad, in (-pi, pi]).
double eccentric_from_true_anomaly(double true_anomaly, double ecc);
// Mean anomaly from eccentric anomaly: M = E - e sin E.
inline double mean_from_eccentric(double E, double ecc);

// Batch solver (vectorised kernel, src/kernels/kepler_kernel.cpp): for each i, solves
// M[i] = E - e sin E and returns sin E and cos E (what the velocity model needs).
// One eccentricity for all points (one planet). `mean_anomaly` may hold any real
// values. Spans must have equal length.
void solve_kepler_sincos(std::span<const double> mean_anomaly, double ecc,
                         std::span<double> sin_E, std::span<double> cos_E);
// Same with a per-point eccentricity, returning E itself (reduced to [0, 2 pi)).
void solve_kepler_batch(std::span<const double> mean_anomaly, std::span<const double> ecc,
                        std::span<double> eccentric_anomaly);

inline double mean_from_eccentric(double E, double ecc) { return E - ecc * std::sin(E); }

}  // namespace apsides
