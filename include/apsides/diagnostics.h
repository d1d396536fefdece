// Convergence diagnostics of Markov chains: integrated autocorrelation time, rank-normalised
// split R-hat, bulk and tail effective sample sizes.
//
// A "chain set" is a list of chains (one per walker, or per independent run) of one scalar
// quantity, all of the same length: chains[c][i] is draw i of chain c.
//
// References
//   Sokal A. 1997, "Monte Carlo methods in statistical mechanics: foundations and new
//     algorithms" (Cargese lectures), section 3: tau_int = 1 + 2 sum_{t=1}^{M} rho(t), the
//     window M the smallest with M >= c tau_int(M); c = 5 by default.
//   Vehtari A., Gelman A., Simpson D., Carpenter B., Buerkner P.-C. 2021, Bayesian
//     Analysis 16, 667: rank normalisation z = Phi^-1((r - 3/8)/(S + 1/4)), split chains,
//     R-hat = max(bulk R-hat, R-hat of the folded draws |x - median|), bulk ESS on the
//     rank-normalised split chains, tail ESS = min of the ESS of the indicators
//     I(x <= q05) and I(x <= q95), Geyer's initial-monotone-sequence truncation.
//     The numbers agree with the R package `posterior` (CHECKS.md section 5).
#pragma once

#include <span>
#include <vector>

namespace apsides {

using ChainSet = std::vector<std::vector<double>>;

// Normalised autocorrelation function rho(t), t = 0 .. n-1, of one series (biased
// estimator: autocovariance sums divided by n, computed with FFTW).
std::vector<double> autocorrelation(std::span<const double> x);

struct AutocorrTime {
  double tau = 0.0;  // integrated autocorrelation time, in steps (>= 0; 1 for white noise)
  long window = 0;   // Sokal window M
  bool reliable = false;  // the window was found (M < n); else tau is a lower bound
};

// Integrated autocorrelation time of one series with Sokal's automatic window,
// tau(M) = 2 sum_{t=0}^{M} rho(t) - 1, M the first lag with M >= c tau(M).
AutocorrTime integrated_autocorr_time(std::span<const double> x, double window_c = 5.0);

// The same for an ensemble: rho(t) averaged over the chains before the window is chosen
// (the ensemble-sampler practice: walkers are not independent, their mean ACF is).
AutocorrTime integrated_autocorr_time(const ChainSet& chains, double window_c = 5.0);

// Rank-normalised split R-hat: max of bulk and folded (tail) R-hat. NaN when the draws
// are constant or the chains have fewer than 4 draws.
double split_rhat(const ChainSet& chains);
// The two halves of split_rhat, for reports.
double bulk_rhat(const ChainSet& chains);
double tail_rhat(const ChainSet& chains);

// Bulk effective sample size (rank-normalised split chains).
double ess_bulk(const ChainSet& chains);
// Tail effective sample size: min over the 5 % and 95 % quantile indicators.
double ess_tail(const ChainSet& chains);
// Effective sample size of the plain split chains (no rank normalisation), Geyer's
// initial monotone sequence; the estimator both ESS variants share.
double ess_basic(const ChainSet& chains);

// Summary of one parameter's chains, as printed and stored by the sampler.
struct ParameterDiagnostics {
  double rhat = 0.0;
  double ess_bulk = 0.0;
  double ess_tail = 0.0;
  double tau = 0.0;
  bool tau_reliable = false;
};
ParameterDiagnostics diagnose(const ChainSet& chains, double window_c = 5.0);

}  // namespace apsides
