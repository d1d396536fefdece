// Orbital stability of a multi-planet system (the computational core; the `stability`
// command and report sections wrap it). Three criteria of increasing cost:
//
// 1. Mutual Hill separation (Gladman 1993, Icarus 106, 247). For each pair of planets
//    adjacent in period, the mutual Hill radius R_H = ((m_1 + m_2) / (3 M_star))^(1/3)
//    (a_1 + a_2) / 2 and the separation Delta = (a_2 - a_1) / R_H. Two planets on circular
//    coplanar orbits are Hill stable (can never have a close encounter) when
//    Delta > 2 sqrt(3) ~ 3.46. For eccentric orbits Gladman's criterion (his Eq. 21, from
//    Marchal & Bozis 1982; written here as in the later literature [from memory, checked
//    against the 2 sqrt 3 limit in tests/stability_test.cpp]):
//        alpha^-3 (mu_1 + mu_2 / delta^2) (mu_1 gamma_1 + mu_2 gamma_2 delta)^2
//            > 1 + 3^(4/3) mu_1 mu_2 / alpha^(4/3),
//    mu_i = m_i / M_star, alpha = mu_1 + mu_2, gamma_i = sqrt(1 - e_i^2), delta = sqrt(a_2 / a_1).
//    It is a two-planet, coplanar result; for more planets it is applied pair by pair,
//    which is necessary but not sufficient (Chambers et al. 1996 found systems of several
//    planets unstable at separations of 5-10 R_H).
//
// 2. AMD stability (Laskar & Petit 2017, A&A 605, A72). The angular momentum deficit
//    A = sum_k Lambda_k - |sum_k G_k|, Lambda_k = m_k sqrt(G M_star a_k), G_k = Lambda_k
//    sqrt(1 - e_k^2) n_k (n_k the orbit normal), is conserved by the secular dynamics.
//    For each adjacent pair (inner k, outer k'), alpha = a_k / a_k', gamma = m_k / m_k',
//    the relative AMD C = A / Lambda_k' is compared with the critical value C_c(alpha,
//    gamma), the least AMD with which the two orbits can cross:
//        C_c = gamma sqrt(alpha) (1 - sqrt(1 - e0^2)) + 1 - sqrt(1 - e0'^2),
//        e0' = 1 - alpha - alpha e0,  e0 the root in (0, 1) of
//        alpha e + gamma e / sqrt(alpha (1 - e^2) + gamma^2 e^2) - 1 + alpha = 0
//    (their Eqs. for the coplanar collision condition; derived again in stability.cpp).
//    beta = C / C_c < 1 for every pair means AMD stable; the innermost planet can reach the
//    star only if A >= Lambda_1 (beta_star = A / Lambda_1).
//    MMR-overlap refinement (Petit, Laskar & Boue 2017, A&A 607, A35): close pairs are
//    chaotic when first-order mean-motion resonances overlap. With eps = (m_k + m_k') /
//    M_star and r = 0.80199 [from memory], the critical relative eccentricity for overlap
//        g = 3^4 (1 - alpha)^5 / (2^9 r eps) - 32 r eps / (9 (1 - alpha)^2)
//    gives C_MMR = g^2 gamma sqrt(alpha) / (2 (1 + gamma sqrt(alpha))) (the least AMD with
//    |e' - e| = g at small e); g <= 0 means the circular orbits already overlap
//    (1 - alpha < 1.46 eps^(2/7), the circular-orbit overlap criterion of Deck et al. 2013).
//    beta_mmr = C / min(C_c, C_MMR) (infinite when g <= 0). [The formulas for g and r are
//    quoted from memory of the paper; the test checks that g = 0 reproduces 1.46 eps^(2/7).]
//    Inclinations enter only through A (|sum G_k| with the orbit normals); the collision
//    condition is the coplanar one, as in the paper.
//
// 3. N-body survival and MEGNO (Cincotta & Simo 2000, A&AS 147, 205). The system is
//    integrated with the Wisdom–Holman map for `inner_orbits` orbits of the innermost
//    planet together with the map's tangent map (variational equations of the map:
//    differentiated Kepler drift, Mikkola & Innanen 1999, AJ 118, 1369, and the Jacobian
//    of the kick). With delta the tangent vector,
//        Y(t) = (2 / t) int_0^t s d(ln |delta|),   <Y>(t) = (1 / t) int_0^t Y(s) ds,
//    evaluated per step with midpoint times. <Y> -> 2 for quasi-periodic orbits (0 for
//    a harmonic oscillator), grows as lambda t / 2 for chaotic ones (lambda the Lyapunov
//    exponent). "Survived": no close encounter (planets within encounter_hill_radii
//    mutual Hill radii) and no unbound Jacobi orbit during the run. "Regular": survived
//    and <Y> < regular_threshold (default 2.5). Neither proves long-term stability: chaos
//    slower than the run is not seen.
//
// assess_stability applies all three to a list of systems (e.g. posterior draws) and
// returns the fraction passing each criterion. It is thread-safe and runs the draws on
// `threads` threads; the result does not depend on the thread count.
#pragma once

#include <cstddef>
#include <cstdint>
#include <limits>
#include <span>
#include <string>
#include <vector>

#include "apsides/nbody.h"

namespace apsides {

struct HillPair {
  int inner = -1, outer = -1;  // planet indices in the caller's order (adjacent in period)
  double mutual_hill_radius_au = std::numeric_limits<double>::quiet_NaN();
  double separation_hill = std::numeric_limits<double>::quiet_NaN();  // Delta = (a_out - a_in) / R_H
  bool beyond_two_sqrt3 = false;  // Delta > 2 sqrt(3)
  double gladman_ratio = std::numeric_limits<double>::quiet_NaN();  // LHS / RHS of Gladman's criterion
  bool hill_stable = false;       // gladman_ratio > 1
};

struct HillReport {
  std::vector<HillPair> pairs;
  double min_separation_hill = std::numeric_limits<double>::infinity();
  bool all_beyond_two_sqrt3 = true;
  bool all_hill_stable = true;
};

// Semi-major axes are the Jacobi ones of nbody.h (interior mass). Requires a valid system.
HillReport mutual_hill_separations(const NbodySystem& system);

struct AmdPair {
  int inner = -1, outer = -1;  // caller's indices
  double alpha = std::numeric_limits<double>::quiet_NaN();   // a_in / a_out
  double gamma = std::numeric_limits<double>::quiet_NaN();   // m_in / m_out
  double relative_amd = std::numeric_limits<double>::quiet_NaN();  // C = A / Lambda_out
  double critical_amd = std::numeric_limits<double>::quiet_NaN();  // C_c(alpha, gamma)
  double critical_amd_mmr = std::numeric_limits<double>::quiet_NaN();  // C_MMR (0 when circular orbits overlap)
  double beta = std::numeric_limits<double>::quiet_NaN();       // C / C_c
  double beta_mmr = std::numeric_limits<double>::quiet_NaN();   // C / min(C_c, C_MMR)
};

struct AmdReport {
  double amd = std::numeric_limits<double>::quiet_NaN();  // A, in M_star sqrt(G M_star au) units (G M_star = 1)
  double beta_star = std::numeric_limits<double>::quiet_NaN();  // A / Lambda_1 (collision with the star)
  std::vector<AmdPair> pairs;
  double max_beta = 0.0, max_beta_mmr = 0.0;
  bool amd_stable = false;      // every pair beta < 1 and beta_star < 1
  bool amd_stable_mmr = false;  // every pair beta_mmr < 1 and beta_star < 1
};

AmdReport amd_stability(const NbodySystem& system);

// The critical AMD C_c(alpha, gamma) of Laskar & Petit 2017 (0 < alpha < 1, gamma > 0).
double critical_amd(double alpha, double gamma);
// Petit, Laskar & Boue 2017: critical relative eccentricity g for first-order MMR overlap
// (may be <= 0) and C_MMR (0 when g <= 0). eps = (m + m') / M_star.
double mmr_overlap_eccentricity(double alpha, double eps);
double critical_amd_mmr(double alpha, double gamma, double eps);

struct MegnoOptions {
  double inner_orbits = 5000.0;        // run length in periods of the innermost planet, > 0
  double step_fraction = 1.0 / 30.0;   // h = step_fraction * min P (1 - e)^(3/2), as nbody.h
  double encounter_hill_radii = 1.0;   // close encounter = not survived (0: off)
  double regular_threshold = 2.5;      // <Y> below this (and survived) counts as regular
  std::uint64_t seed = 1;              // initial tangent vector (random direction)
  std::string Validate() const;
};

struct MegnoResult {
  NbodyStatus status = NbodyStatus::kNotRun;  // kOk when the full run was completed
  std::string message = "megno was not run.";
  double mean_megno = std::numeric_limits<double>::quiet_NaN();  // <Y> at the end of the run (or the stop)
  double time_days = 0.0;            // integrated time
  double inner_orbits_done = 0.0;
  bool survived = false;
  bool regular = false;
  std::string BriefReport() const;
};

MegnoResult megno(const NbodySystem& system, const MegnoOptions& options = {});

struct StabilityOptions {
  bool hill = true;
  bool amd = true;
  bool nbody = true;         // survival + MEGNO (the expensive one)
  MegnoOptions megno;
  int threads = 1;           // 0 = std::thread::hardware_concurrency()
  std::string Validate() const;
};

struct DrawStability {
  bool valid = false;             // the draw passed NbodySystem::Validate
  bool hill_two_sqrt3 = false;    // every pair Delta > 2 sqrt 3
  bool hill_gladman = false;      // every pair Gladman-stable
  bool amd = false;
  bool amd_mmr = false;
  bool survived = false;
  bool megno_regular = false;
  double min_separation_hill = std::numeric_limits<double>::quiet_NaN();
  double max_amd_beta = std::numeric_limits<double>::quiet_NaN();
  double mean_megno = std::numeric_limits<double>::quiet_NaN();
};

struct StabilitySummary {
  std::size_t draws = 0;
  std::size_t invalid_draws = 0;
  // Fractions of all draws (invalid draws count as failing); NaN for a criterion not run.
  double fraction_hill_two_sqrt3 = std::numeric_limits<double>::quiet_NaN();
  double fraction_hill_gladman = std::numeric_limits<double>::quiet_NaN();
  double fraction_amd = std::numeric_limits<double>::quiet_NaN();
  double fraction_amd_mmr = std::numeric_limits<double>::quiet_NaN();
  double fraction_survived = std::numeric_limits<double>::quiet_NaN();
  double fraction_megno_regular = std::numeric_limits<double>::quiet_NaN();
  std::vector<DrawStability> per_draw;
  std::string message = "assess_stability was not run.";
  std::string BriefReport() const;
  std::string FullReport() const;
};

StabilitySummary assess_stability(std::span<const NbodySystem> draws, const StabilityOptions& options = {});

}  // namespace apsides
