#include "apsides/evidence.h"

#include <fmt/format.h>

#include <boost/math/distributions/normal.hpp>

#include <Eigen/Cholesky>
#include <Eigen/Dense>
#include <algorithm>
#include <array>
#include <atomic>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <memory>
#include <mutex>
#include <numeric>
#include <optional>
#include <random>
#include <thread>

#include "apsides/constants.h"
#include "apsides/ephemeris.h"
#include "apsides/periodogram.h"
#include "apsides/error.h"
#include "evidence_internal.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();

double log_add_exp(double a, double b) {
  if (a == -kInf) return b;
  if (b == -kInf) return a;
  const double m = std::max(a, b);
  return m + std::log1p(std::exp(-std::fabs(a - b)));
}


// A small persistent pool: run(count, fn) calls fn(0..count-1) on the workers and the
// calling thread and returns when all are done. Task i never depends on which thread
// runs it.
class Workers {
 public:
  explicit Workers(int n_threads) {
    for (int i = 1; i < n_threads; ++i) threads_.emplace_back([this] { loop(); });
  }
  ~Workers() {
    {
      std::lock_guard<std::mutex> lock(mutex_);
      stop_ = true;
    }
    cv_.notify_all();
    for (auto& t : threads_) t.join();
  }
  void run(int count, const std::function<void(int)>& fn) {
    if (threads_.empty() || count <= 1) {
      for (int i = 0; i < count; ++i) fn(i);
      return;
    }
    {
      std::lock_guard<std::mutex> lock(mutex_);
      fn_ = &fn;
      count_ = count;
      next_.store(0);
      pending_ = count;
      ++generation_;
    }
    cv_.notify_all();
    work();
    std::unique_lock<std::mutex> lock(mutex_);
    done_cv_.wait(lock, [this] { return pending_ == 0; });
    fn_ = nullptr;
  }

 private:
  void work() {
    for (;;) {
      const int i = next_.fetch_add(1);
      if (i >= count_) return;
      (*fn_)(i);
      std::lock_guard<std::mutex> lock(mutex_);
      if (--pending_ == 0) done_cv_.notify_all();
    }
  }
  void loop() {
    std::uint64_t seen = 0;
    for (;;) {
      {
        std::unique_lock<std::mutex> lock(mutex_);
        cv_.wait(lock, [&] { return stop_ || (generation_ != seen && fn_ != nullptr); });
        if (stop_) return;
        seen = generation_;
      }
      work();
    }
  }
  std::vector<std::thread> threads_;
  std::mutex mutex_;
  std::condition_variable cv_, done_cv_;
  const std::function<void(int)>* fn_ = nullptr;
  int count_ = 0;
  std::atomic<int> next_{0};
  int pending_ = 0;
  std::uint64_t generation_ = 0;
  bool stop_ = false;
};

struct LivePoint {
  std::vector<double> u, theta;
  double ln_like = -kInf;
};

struct Evaluator {
  const NestedProblem& problem;
  int n_params;
  // Returns ln L at cube point u (filling theta); -inf outside the cube.
  double operator()(std::span<const double> u, std::span<double> theta) const {
    for (double x : u)
      if (!(x >= 0.0 && x < 1.0)) return -kInf;
    problem.prior_transform(u, theta);
    double l = problem.log_likelihood(theta);
    if (problem.log_prior_ratio_index >= 0) l -= theta[static_cast<std::size_t>(problem.log_prior_ratio_index)];
    return std::isnan(l) ? -kInf : l;
  }
};

struct WalkOutcome {
  LivePoint point;
  long calls = 0;
  bool ok = false;
};

// Mass of normal(c, w) inside [0, 1).
double unit_mass(double c, double w) {
  const double r = 1.0 / (w * std::sqrt(2.0));
  return std::max(0.5 * (std::erf((1.0 - c) * r) - std::erf(-c * r)), 1e-300);
}
}  // namespace

namespace {

// Normal(c, w) truncated to the cube's [0, 1).
double truncated_draw(double c, double w, std::mt19937_64& rng) {
  return truncated_normal_draw(c, w, 0.0, std::nextafter(1.0, 0.0), rng);
}

// A jump with what its proposal density needs precomputed (per run): the block's
// coordinates, and per target the log of the normalising constants (truncation masses,
// 1 / (w sqrt(2 pi)), weight share).
struct PreparedJump {
  const NestedProblem::Jump* jump = nullptr;
  std::vector<int> block;
  std::vector<double> ln_norm;  // per target
};

// The cube coordinates of a jump's block, in the order period, amplitude, the rest.
std::vector<int> jump_block(const NestedProblem::Jump& j) {
  std::vector<int> c{j.coordinate};
  if (j.small_coordinate >= 0) c.push_back(j.small_coordinate);
  c.insert(c.end(), j.redraw_uniform.begin(), j.redraw_uniform.end());
  return c;
}

PreparedJump prepare_jump(const NestedProblem::Jump& j) {
  PreparedJump pj;
  pj.jump = &j;
  pj.block = jump_block(j);
  double total = 0.0;
  for (const auto& t : j.targets) total += t.weight;
  const double ln_gauss = -0.5 * std::log(2.0 * constants::kPi);
  for (const auto& t : j.targets) {
    double ln = std::log(t.weight / total) + ln_gauss - std::log(t.period_w) - std::log(unit_mass(t.period_u, t.period_w));
    if (j.small_coordinate >= 0 && std::isfinite(t.amplitude_u))
      ln += ln_gauss - std::log(t.amplitude_w) - std::log(unit_mass(t.amplitude_u, t.amplitude_w));
    if (j.phase_coordinate >= 0 && std::isfinite(t.phase_u)) ln += ln_gauss - std::log(t.phase_w);
    pj.ln_norm.push_back(ln);
  }
  return pj;
}

// Density of the targets part of a mode jump at y (see NestedProblem::Jump). Terms more
// than 8 widths away in any coordinate (relative size < e^-32) are left out, and the
// wrapped phase uses its nearest image (widths <= 0.1 cycle: the others are < e^-12 of it
// at the far side, and the draw is truncated to match, see jump_draw).
double targets_density(const PreparedJump& pj, const Eigen::VectorXd& y) {
  const NestedProblem::Jump& j = *pj.jump;
  double g = 0.0;
  for (std::size_t m = 0; m < j.targets.size(); ++m) {
    const auto& t = j.targets[m];
    const double zp = (y[j.coordinate] - t.period_u) / t.period_w;
    if (std::fabs(zp) > 8.0) continue;
    double e = zp * zp;
    if (j.small_coordinate >= 0 && std::isfinite(t.amplitude_u)) {
      const double z = (y[j.small_coordinate] - t.amplitude_u) / t.amplitude_w;
      e += z * z;
    }
    if (j.phase_coordinate >= 0 && std::isfinite(t.phase_u)) {
      double dph = y[j.phase_coordinate] - t.phase_u;
      dph -= std::round(dph);
      const double z = dph / t.phase_w;
      e += z * z;
    }
    if (e < 128.0) g += std::exp(pj.ln_norm[m] - 0.5 * e);
  }
  return j.targets.empty() ? 1.0 : g;
}

// The live points' blocks as a kernel density: the blocks of every jump in up to
// kMaxKernels live points (the jumps' blocks are pooled: a planet's block may land where
// another planet's sits in some live point), a Gaussian kernel around each, in
// coordinates whitened by the blocks' covariance, of width half the distance to its 5th
// nearest neighbour (so a tight cluster gets tight kernels). Rebuilt every few
// iterations from the live points; fixed while the walks run, so the jumps stay exact
// Metropolis-Hastings moves.
class LiveKernels {
 public:
  static constexpr std::size_t kMaxKernels = 192;
  bool empty() const { return m_ == 0; }

  void build(const std::vector<LivePoint>& live, const std::vector<PreparedJump>& jumps) {
    m_ = 0;
    if (jumps.empty()) return;
    D_ = static_cast<int>(jumps.front().block.size());
    for (const auto& j : jumps)
      if (static_cast<int>(j.block.size()) != D_) return;  // blocks of different shapes: no pooled kernels
    if (D_ > kMaxBlock) return;
    const int D = D_;
    const std::size_t all = live.size() * jumps.size();
    const std::size_t stride = (all + kMaxKernels - 1) / kMaxKernels;
    const std::size_t m = (all + stride - 1) / stride;
    if (m < 2) return;
    Eigen::MatrixXd x(static_cast<Eigen::Index>(m), D);
    for (std::size_t r = 0; r < m; ++r) {
      const std::size_t q = r * stride;
      const LivePoint& lp = live[q / jumps.size()];
      const auto& bl = jumps[q % jumps.size()].block;
      for (int c = 0; c < D; ++c) x(static_cast<Eigen::Index>(r), c) = lp.u[static_cast<std::size_t>(bl[static_cast<std::size_t>(c)])];
    }
    mean_ = x.colwise().mean().transpose();
    const Eigen::MatrixXd centred = x.rowwise() - mean_.transpose();
    Eigen::MatrixXd cov = centred.transpose() * centred / std::max(1.0, static_cast<double>(m) - 1.0);
    cov.diagonal().array() += 1e-12;
    Eigen::LLT<Eigen::MatrixXd> llt(cov);
    if (llt.info() != Eigen::Success) return;
    chol_ = llt.matrixL();
    const Eigen::MatrixXd w = llt.matrixL().solve(centred.transpose());  // D x m, whitened
    double ln_det = 0.0;
    for (int c = 0; c < D; ++c) ln_det += std::log(chol_(c, c));
    const std::size_t k = std::min<std::size_t>(5, m - 1);
    centres_.assign(w.data(), w.data() + w.size());  // column i = centre i
    ln_norm_.assign(m, 0.0);
    inv_two_h2_.assign(m, 0.0);
    h_.assign(m, 0.0);
    std::vector<double> d2(m);
    for (std::size_t i = 0; i < m; ++i) {
      for (std::size_t j = 0; j < m; ++j) d2[j] = (w.col(static_cast<Eigen::Index>(j)) - w.col(static_cast<Eigen::Index>(i))).squaredNorm();
      d2[i] = kInf;
      std::nth_element(d2.begin(), d2.begin() + static_cast<std::ptrdiff_t>(k - 1), d2.end());
      const double h = std::max(0.5 * std::sqrt(d2[k - 1]), 1e-6);
      h_[i] = h;
      inv_two_h2_[i] = 0.5 / (h * h);
      ln_norm_[i] = -D * std::log(h) - 0.5 * D * std::log(2.0 * constants::kPi) - ln_det - std::log(static_cast<double>(m));
    }
    m_ = m;
  }

  // Density at the block's cube coordinates y[block[c]].
  double density(const Eigen::VectorXd& y, const std::vector<int>& block) const {
    std::array<double, kMaxBlock> w{};
    for (int r = 0; r < D_; ++r) {  // forward substitution: w = L^-1 (y_block - mean)
      double v = y[block[static_cast<std::size_t>(r)]] - mean_[r];
      for (int c = 0; c < r; ++c) v -= chol_(r, c) * w[static_cast<std::size_t>(c)];
      w[static_cast<std::size_t>(r)] = v / chol_(r, r);
    }
    double q = 0.0;
    const double* ctr = centres_.data();
    for (std::size_t i = 0; i < m_; ++i, ctr += D_) {
      double d2 = 0.0;
      for (int c = 0; c < D_; ++c) {
        const double t = w[static_cast<std::size_t>(c)] - ctr[c];
        d2 += t * t;
      }
      const double e = d2 * inv_two_h2_[i];
      if (e < 60.0) q += std::exp(ln_norm_[i] - e);
    }
    return q;
  }

  void draw(Eigen::VectorXd& y, const std::vector<int>& block, std::mt19937_64& rng) const {
    std::uniform_int_distribution<std::size_t> pick(0, m_ - 1);
    std::normal_distribution<double> gauss(0.0, 1.0);
    const std::size_t i = pick(rng);
    Eigen::VectorXd z(D_);
    for (int c = 0; c < D_; ++c) z[c] = centres_[i * static_cast<std::size_t>(D_) + static_cast<std::size_t>(c)] + h_[i] * gauss(rng);
    const Eigen::VectorXd b = mean_ + chol_ * z;
    for (int c = 0; c < D_; ++c) y[block[static_cast<std::size_t>(c)]] = b[c];
  }

 private:
  static constexpr int kMaxBlock = 16;
  int D_ = 0;
  std::size_t m_ = 0;
  Eigen::VectorXd mean_;
  Eigen::MatrixXd chol_;
  std::vector<double> centres_;  // m_ x D_, whitened
  std::vector<double> ln_norm_, inv_two_h2_, h_;
};

// Density of a jump's proposal at the point y (only its block matters).
double jump_density(const PreparedJump& pj, double kappa, const LiveKernels& kde, const Eigen::VectorXd& y) {
  const NestedProblem::Jump& j = *pj.jump;
  const double wp = j.targets.empty() ? 0.0 : j.w_peak;
  const double ws = j.small_coordinate >= 0 ? j.w_small : 0.0;
  const double wl = kde.empty() ? 0.0 : j.w_live;
  const double norm = j.w_uniform + wp + ws + wl;
  double q = j.w_uniform;
  if (wp > 0.0) q += wp * targets_density(pj, y);
  if (ws > 0.0 && y[j.small_coordinate] < kappa) q += ws / kappa;
  if (wl > 0.0) q += wl * kde.density(y, pj.block);
  return q / norm;
}

// Draws a jump block into y (period, amplitude, uniform coordinates).
void jump_draw(const PreparedJump& pj, double kappa, const LiveKernels& kde, Eigen::VectorXd& y,
               std::mt19937_64& rng) {
  const NestedProblem::Jump& j = *pj.jump;
  std::uniform_real_distribution<double> unif(0.0, 1.0);
  const double wp = j.targets.empty() ? 0.0 : j.w_peak;
  const double ws = j.small_coordinate >= 0 ? j.w_small : 0.0;
  const double wl = kde.empty() ? 0.0 : j.w_live;
  const double r = unif(rng) * (j.w_uniform + wp + ws + wl);
  if (r >= j.w_uniform + wp + ws) {
    kde.draw(y, pj.block, rng);
    return;  // may fall outside the cube: rejected there (q is the untruncated mixture)
  }
  y[j.coordinate] = unif(rng);
  if (j.small_coordinate >= 0) y[j.small_coordinate] = unif(rng);
  for (int c : j.redraw_uniform) y[c] = unif(rng);
  if (r < j.w_uniform) return;
  if (r < j.w_uniform + wp) {
    double total = 0.0;
    for (const auto& t : j.targets) total += t.weight;
    double pick = unif(rng) * total;
    std::size_t m = 0;
    while (m + 1 < j.targets.size() && pick >= j.targets[m].weight) pick -= j.targets[m++].weight;
    const auto& t = j.targets[m];
    y[j.coordinate] = truncated_draw(t.period_u, t.period_w, rng);
    if (j.small_coordinate >= 0 && std::isfinite(t.amplitude_u))
      y[j.small_coordinate] = truncated_draw(t.amplitude_u, t.amplitude_w, rng);
    if (j.phase_coordinate >= 0 && std::isfinite(t.phase_u)) {
      // Within half a cycle of the centre, wrapped (the density uses the nearest image).
      double v;
      do v = std::normal_distribution<double>(0.0, t.phase_w)(rng);
      while (std::fabs(v) >= 0.5);
      v += t.phase_u;
      y[j.phase_coordinate] = v - std::floor(v);
    }
    return;
  }
  y[j.small_coordinate] = kappa * unif(rng);
}

// One replacement: a slice-sampling walk from `start` inside ln L > ln_like_min, with
// mode-jump attempts between slice moves.
WalkOutcome slice_walk(const Evaluator& eval, const LivePoint& start, double ln_like_min,
                       const Eigen::MatrixXd& chol, int steps, std::mt19937_64& rng,
                       const std::vector<PreparedJump>& jumps, const std::vector<double>& kappas,
                       const LiveKernels& kde, double jumps_per_step) {
  const int d = static_cast<int>(start.u.size());
  std::uniform_real_distribution<double> unif(0.0, 1.0);
  std::normal_distribution<double> gauss(0.0, 1.0);
  WalkOutcome out;
  out.point = start;
  Eigen::VectorXd x = Eigen::Map<const Eigen::VectorXd>(start.u.data(), d);
  Eigen::VectorXd y(d);
  std::vector<double> theta(start.theta.size());
  Eigen::MatrixXd basis;
  auto inside = [&](const Eigen::VectorXd& p, double& ln_like) {
    ++out.calls;
    ln_like = eval(std::span<const double>(p.data(), static_cast<std::size_t>(d)), theta);
    return ln_like > ln_like_min;
  };
  constexpr int kMaxStepOut = 32, kMaxShrink = 200;
  for (int s = 0; s < steps; ++s) {
    const int k = s % d;
    if (k == 0) {
      Eigen::MatrixXd g(d, d);
      for (int i = 0; i < d; ++i)
        for (int j = 0; j < d; ++j) g(i, j) = gauss(rng);
      basis = Eigen::HouseholderQR<Eigen::MatrixXd>(g).householderQ();
    }
    const Eigen::VectorXd v = chol * basis.col(k);
    double left = -unif(rng), right = left + 1.0, l = 0.0;
    for (int i = 0; i < kMaxStepOut; ++i) {
      y = x + left * v;
      if (!inside(y, l)) break;
      left -= 1.0;
    }
    for (int i = 0; i < kMaxStepOut; ++i) {
      y = x + right * v;
      if (!inside(y, l)) break;
      right += 1.0;
    }
    bool moved = false;
    for (int i = 0; i < kMaxShrink; ++i) {
      const double t = left + unif(rng) * (right - left);
      y = x + t * v;
      if (inside(y, l)) {
        x = y;
        out.point.ln_like = l;
        out.point.theta = theta;
        moved = true;
        break;
      }
      if (t < 0.0) left = t; else right = t;
    }
    if (!moved) return out;  // the bracket collapsed onto x without finding a point
    // floor(rate) jump attempts, plus one more with probability frac(rate).
    int n_jumps = jumps.empty() ? 0 : static_cast<int>(jumps_per_step);
    if (!jumps.empty() && unif(rng) < jumps_per_step - std::floor(jumps_per_step)) ++n_jumps;
    for (int q = 0; q < n_jumps; ++q) {
      std::uniform_int_distribution<std::size_t> pick(0, jumps.size() - 1);
      const std::size_t which = pick(rng);
      const PreparedJump& jp = jumps[which];
      const double kappa = kappas[which];
      y = x;
      jump_draw(jp, kappa, kde, y, rng);
      bool in_cube = true;
      for (int c = 0; c < d; ++c) in_cube = in_cube && y[c] >= 0.0 && y[c] < 1.0;
      if (!in_cube) continue;
      const double accept = jump_density(jp, kappa, kde, x) / jump_density(jp, kappa, kde, y);
      if (unif(rng) < accept && inside(y, l)) {
        x = y;
        out.point.ln_like = l;
        out.point.theta = theta;
      }
    }
  }
  out.point.u.assign(x.data(), x.data() + d);
  out.ok = true;
  return out;
}

}  // namespace

std::string to_string(NestedTermination t) {
  switch (t) {
    case NestedTermination::kNotRun: return "not run";
    case NestedTermination::kConverged: return "converged";
    case NestedTermination::kMaxIterations: return "hit max_iterations";
    case NestedTermination::kSliceFailed: return "slice sampling failed";
    case NestedTermination::kBadLikelihood: return "no finite likelihood";
  }
  return "unknown";
}

std::string NestedOptions::Validate() const {
  if (batch_size < 1) return fmt::format("batch_size = {}: must be >= 1", batch_size);
  if (live_points < 2 * batch_size + 1)
    return fmt::format("live_points = {}: must be >= 2 x batch_size + 1 = {}", live_points, 2 * batch_size + 1);
  if (threads < 0) return fmt::format("threads = {}: must be >= 0", threads);
  if (slice_steps < 0) return fmt::format("slice_steps = {}: must be >= 0", slice_steps);
  if (!(ln_z_tolerance > 0.0) || !std::isfinite(ln_z_tolerance))
    return fmt::format("ln_z_tolerance = {}: must be > 0", ln_z_tolerance);
  if (max_iterations < 0) return fmt::format("max_iterations = {}: must be >= 0", max_iterations);
  if (!(jumps_per_step >= 0.0 && jumps_per_step <= 100.0))
    return fmt::format("jumps_per_step = {}: must be in [0, 100]", jumps_per_step);
  return "";
}

namespace {

// The state of one run, and its steps (run_nested_sampling strings them together).
struct NestedRun {
  const NestedProblem& problem;
  const NestedOptions& options;
  int d = 0, p = 0, n = 0, batch = 0, steps = 0;
  Workers workers;
  Evaluator eval;
  std::vector<LivePoint> live;
  std::vector<PreparedJump> prepared;
  LiveKernels kernels;
  double ln_x = 0.0, ln_z = -kInf;
  long calls = 0;
  std::uint64_t replacement_stream = 0;
  NestedResult res;

  NestedRun(const NestedProblem& pr, const NestedOptions& o)
      : problem(pr), options(o), d(pr.dimension), p(pr.n_params > 0 ? pr.n_params : pr.dimension),
        n(o.live_points), batch(o.batch_size),
        steps(o.slice_steps > 0 ? o.slice_steps
                                : std::max(1, static_cast<int>(std::lround(pr.slice_steps_per_dimension * d)))),
        workers(o.threads > 0 ? o.threads : std::max(1, static_cast<int>(std::thread::hardware_concurrency()))),
        eval{pr, p} {
    res.names = pr.names;
    res.live_points = n;
    for (const auto& j : pr.jumps) prepared.push_back(prepare_jump(j));
  }

  // Initial live points: uniform in the cube (one stream per point). False when none has
  // a finite likelihood.
  bool start() {
    live.assign(static_cast<std::size_t>(n), LivePoint{});
    workers.run(n, [&](int i) {
      auto rng = make_stream(options.seed, static_cast<std::uint64_t>(i));
      std::uniform_real_distribution<double> unif(0.0, 1.0);
      LivePoint& lp = live[static_cast<std::size_t>(i)];
      lp.u.resize(static_cast<std::size_t>(d));
      lp.theta.resize(static_cast<std::size_t>(p));
      for (double& x : lp.u) x = unif(rng);
      lp.ln_like = eval(lp.u, lp.theta);
    });
    calls = n;
    replacement_stream = static_cast<std::uint64_t>(n);
    return std::any_of(live.begin(), live.end(), [](const LivePoint& l) { return std::isfinite(l.ln_like); });
  }

  // Removes the `batch` lowest points (ties broken by index, for determinism) into the
  // dead points; `order` is left sorted with the removed ones first.
  void remove_lowest(std::vector<int>& order, std::vector<int>& removed) {
    std::iota(order.begin(), order.end(), 0);
    std::partial_sort(order.begin(), order.begin() + batch, order.end(), [&](int a, int b) {
      const double la = live[static_cast<std::size_t>(a)].ln_like, lb = live[static_cast<std::size_t>(b)].ln_like;
      return la < lb || (la == lb && a < b);
    });
    for (int j = 0; j < batch; ++j) {
      const LivePoint& w = live[static_cast<std::size_t>(order[static_cast<std::size_t>(j)])];
      const double shrink = 1.0 / static_cast<double>(n - j);
      const double ln_x_new = ln_x - shrink;
      const double ln_w = w.ln_like + ln_x + std::log(-std::expm1(-shrink));
      ln_z = log_add_exp(ln_z, ln_w);
      res.samples.push_back({w.theta, w.ln_like, ln_x_new, ln_w});
      ln_x = ln_x_new;
      removed[static_cast<std::size_t>(j)] = order[static_cast<std::size_t>(j)];
    }
  }

  // The survivors' covariance in the cube, factored: the slice directions.
  Eigen::MatrixXd slice_directions(const std::vector<int>& order) const {
    Eigen::MatrixXd pts(static_cast<Eigen::Index>(n - batch), d);
    for (int i = batch; i < n; ++i)
      for (int k = 0; k < d; ++k)
        pts(i - batch, k) = live[static_cast<std::size_t>(order[static_cast<std::size_t>(i)])].u[static_cast<std::size_t>(k)];
    const Eigen::RowVectorXd mean = pts.colwise().mean();
    const Eigen::MatrixXd centred = pts.rowwise() - mean;
    Eigen::MatrixXd cov = centred.transpose() * centred / std::max(1.0, static_cast<double>(n - batch - 1));
    cov.diagonal().array() += 1e-12;
    Eigen::LLT<Eigen::MatrixXd> llt(cov);
    return llt.info() == Eigen::Success ? Eigen::MatrixXd(llt.matrixL())
                                        : Eigen::MatrixXd(cov.diagonal().cwiseSqrt().asDiagonal());
  }

  // Each jump's "no signal" amplitude range: the lower quartile of the live points'
  // amplitude coordinates over every jump block (at least 1e-6).
  std::vector<double> jump_kappas(const std::vector<int>& order) const {
    std::vector<double> kappas(problem.jumps.size(), 1.0);
    if (problem.jumps.empty()) return kappas;
    std::vector<double> amps;
    for (int i = batch; i < n; ++i)
      for (const auto& jp : problem.jumps)
        if (jp.small_coordinate >= 0)
          amps.push_back(live[static_cast<std::size_t>(order[static_cast<std::size_t>(i)])]
                             .u[static_cast<std::size_t>(jp.small_coordinate)]);
    if (!amps.empty()) {
      const auto q = amps.begin() + static_cast<std::ptrdiff_t>(amps.size() / 4);
      std::nth_element(amps.begin(), q, amps.end());
      std::fill(kappas.begin(), kappas.end(), std::clamp(*q, 1e-6, 1.0));
    }
    return kappas;
  }

  // One iteration: remove the lowest points and refill them by slice walks from the
  // survivors strictly inside the constraint. False when the run must stop.
  bool iterate(long it, std::vector<int>& order, std::vector<int>& removed, std::vector<WalkOutcome>& outcomes) {
    remove_lowest(order, removed);
    const double ln_like_star = live[static_cast<std::size_t>(removed.back())].ln_like;
    std::vector<int> starts;
    for (int i = batch; i < n; ++i)
      if (live[static_cast<std::size_t>(order[static_cast<std::size_t>(i)])].ln_like > ln_like_star)
        starts.push_back(order[static_cast<std::size_t>(i)]);
    std::sort(starts.begin(), starts.end());
    if (starts.empty()) {
      res.termination = NestedTermination::kSliceFailed;
      res.message = "Every live point sits on the likelihood constraint (a likelihood plateau).";
      return false;
    }
    const Eigen::MatrixXd chol = slice_directions(order);
    const std::vector<double> kappas = jump_kappas(order);
    // The live points' kernel density for the jumps, refreshed every few iterations.
    constexpr long kKernelRefresh = 20;
    if (!prepared.empty() && it % kKernelRefresh == 0) kernels.build(live, prepared);
    const std::uint64_t first_stream = replacement_stream;
    replacement_stream += static_cast<std::uint64_t>(batch);
    workers.run(batch, [&](int j) {
      auto rng = make_stream(options.seed, first_stream + static_cast<std::uint64_t>(j));
      std::uniform_int_distribution<std::size_t> pick(0, starts.size() - 1);
      const LivePoint& from = live[static_cast<std::size_t>(starts[pick(rng)])];
      outcomes[static_cast<std::size_t>(j)] =
          slice_walk(eval, from, ln_like_star, chol, steps, rng, prepared, kappas, kernels, options.jumps_per_step);
    });
    bool failed = false;
    for (int j = 0; j < batch; ++j) {
      auto& o = outcomes[static_cast<std::size_t>(j)];
      calls += o.calls;
      if (!o.ok) failed = true;
      live[static_cast<std::size_t>(removed[static_cast<std::size_t>(j)])] = std::move(o.point);
    }
    res.iterations = it + 1;
    if (failed) {
      res.termination = NestedTermination::kSliceFailed;
      res.message = "A slice-sampling walk found no point inside the likelihood constraint.";
      return false;
    }
    return true;
  }

  // The final live points share the remaining volume equally; weights normalised;
  // H = sum p ln L - ln Z; the sampler's own entries removed from theta.
  void close() {
    std::sort(live.begin(), live.end(), [](const LivePoint& a, const LivePoint& b) { return a.ln_like < b.ln_like; });
    for (const auto& l : live) {
      const double ln_w = l.ln_like + ln_x - std::log(static_cast<double>(n));
      ln_z = log_add_exp(ln_z, ln_w);
      res.samples.push_back({l.theta, l.ln_like, ln_x, ln_w});
    }
    double h = 0.0;
    for (auto& s : res.samples) {
      s.ln_weight -= ln_z;
      if (std::isfinite(s.ln_like) && s.ln_weight > -kInf) h += std::exp(s.ln_weight) * s.ln_like;
      if (s.ln_like > res.ln_like_max) {
        res.ln_like_max = s.ln_like;
        res.theta_max_like = s.theta;
      }
    }
    h -= ln_z;
    if (problem.log_prior_ratio_index >= 0) {
      // Report the likelihood itself, and theta without the sampler's own entries.
      const std::size_t idx = static_cast<std::size_t>(problem.log_prior_ratio_index);
      res.ln_like_max = -kInf;
      for (auto& smp : res.samples) {
        smp.ln_like += smp.theta[idx];
        smp.theta.resize(idx);
        if (smp.ln_like > res.ln_like_max) {
          res.ln_like_max = smp.ln_like;
          res.theta_max_like = smp.theta;
        }
      }
    }
    res.ln_evidence = ln_z;
    res.information_nats = std::max(0.0, h);
    res.ln_evidence_err = std::sqrt(res.information_nats / n);
  }

  // Parameters integrated out: posterior draws into every point (one stream per point),
  // and the profile likelihood for the best point.
  void complete_points() {
    std::vector<double> profile(res.samples.size(), -kInf);
    const int n_samples = static_cast<int>(res.samples.size());
    const int chunk = 256;
    workers.run((n_samples + chunk - 1) / chunk, [&](int c) {
      for (int i = c * chunk; i < std::min(n_samples, (c + 1) * chunk); ++i) {
        NestedSample& smp = res.samples[static_cast<std::size_t>(i)];
        std::vector<double> best = smp.theta;
        profile[static_cast<std::size_t>(i)] = problem.complete_point(best, nullptr);
        auto rng = make_stream(options.seed ^ 0xc0ffeeULL, static_cast<std::uint64_t>(i));
        smp.ln_like = problem.complete_point(smp.theta, &rng);
      }
    });
    res.ln_like_max = -kInf;
    for (std::size_t i = 0; i < profile.size(); ++i)
      if (profile[i] > res.ln_like_max) {
        res.ln_like_max = profile[i];
        res.theta_max_like = res.samples[i].theta;
        problem.complete_point(res.theta_max_like, nullptr);
      }
  }
};

}  // namespace

NestedResult run_nested_sampling(const NestedProblem& problem, const NestedOptions& options) {
  if (const std::string v = options.Validate(); !v.empty()) throw InputError("nested sampling: " + v);
  if (problem.dimension < 1) throw InputError("nested sampling: the problem has no free parameter");
  if (options.live_points < problem.dimension + 1)
    throw InputError(fmt::format("live_points = {}: must be >= dimension + 1 = {}", options.live_points,
                                 problem.dimension + 1));
  const auto t_start = std::chrono::steady_clock::now();
  NestedRun run(problem, options);
  NestedResult& res = run.res;
  if (!run.start()) {
    res.termination = NestedTermination::kBadLikelihood;
    res.message = "No initial live point has a finite likelihood: check the priors and the data.";
    return res;
  }
  std::vector<int> order(static_cast<std::size_t>(run.n));
  std::vector<int> removed(static_cast<std::size_t>(run.batch));
  std::vector<WalkOutcome> outcomes(static_cast<std::size_t>(run.batch));
  res.termination = NestedTermination::kConverged;
  for (long it = 0;; ++it) {
    double ln_like_max = -kInf;
    for (const auto& l : run.live) ln_like_max = std::max(ln_like_max, l.ln_like);
    const double ln_remaining = ln_like_max + run.ln_x;
    if (run.ln_z > -kInf && log_add_exp(run.ln_z, ln_remaining) - run.ln_z < options.ln_z_tolerance) break;
    if (options.max_iterations > 0 && it >= options.max_iterations) {
      res.termination = NestedTermination::kMaxIterations;
      break;
    }
    if (options.progress && it % 50 == 0) options.progress(it, run.ln_z, ln_remaining);
    if (!run.iterate(it, order, removed, outcomes)) break;
  }
  run.close();
  if (problem.complete_point) run.complete_points();
  res.likelihood_calls = run.calls;
  res.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t_start).count();
  if (res.termination == NestedTermination::kConverged) {
    res.message = fmt::format("Converged: the live points can add less than {:g} to ln Z.", options.ln_z_tolerance);
  } else if (res.termination == NestedTermination::kMaxIterations) {
    res.message = "Stopped at max_iterations before convergence: ln Z and its error are not reliable.";
  }
  return std::move(res);
}

double NestedResult::effective_sample_size() const {
  double s = 0.0;
  for (const auto& x : samples) s += std::exp(2.0 * x.ln_weight);
  return s > 0.0 ? 1.0 / s : 0.0;
}

std::vector<std::vector<double>> NestedResult::equal_weight_samples(std::size_t n, std::uint64_t seed) const {
  std::vector<std::vector<double>> out;
  if (samples.empty() || n == 0) return out;
  auto rng = make_stream(seed, 0xe9a1ULL);
  const double u0 = std::uniform_real_distribution<double>(0.0, 1.0)(rng);
  double cum = 0.0;
  std::size_t j = 0;
  for (std::size_t i = 0; i < n; ++i) {
    const double target = (static_cast<double>(i) + u0) / static_cast<double>(n);
    while (j < samples.size() && cum + std::exp(samples[j].ln_weight) < target) cum += std::exp(samples[j++].ln_weight);
    out.push_back(samples[std::min(j, samples.size() - 1)].theta);
  }
  // Systematic resampling keeps the dead-point order; shuffle so draws are exchangeable.
  std::shuffle(out.begin(), out.end(), rng);
  return out;
}

double NestedResult::weighted_quantile(std::size_t index, double q) const {
  std::vector<std::pair<double, double>> xw;
  for (const auto& s : samples)
    if (index < s.theta.size() && s.ln_weight > -kInf) xw.emplace_back(s.theta[index], std::exp(s.ln_weight));
  if (xw.empty()) return std::numeric_limits<double>::quiet_NaN();
  std::sort(xw.begin(), xw.end());
  double total = 0.0;
  for (const auto& e : xw) total += e.second;
  double cum = 0.0;
  for (const auto& e : xw) {
    cum += e.second;
    if (cum >= q * total) return e.first;
  }
  return xw.back().first;
}

std::string NestedResult::BriefReport() const {
  if (termination == NestedTermination::kNotRun) return message;
  return fmt::format("ln Z = {:.3f} +- {:.3f} (H = {:.2f} nats, {} live points, {} iterations, {} likelihood calls, "
                     "{:.1f} s): {}",
                     ln_evidence, ln_evidence_err, information_nats, live_points, iterations, likelihood_calls,
                     seconds, to_string(termination));
}

std::string NestedResult::FullReport() const {
  std::string s = BriefReport() + "\n" + message + "\n";
  s += fmt::format("max ln L = {:.3f}; posterior effective sample size {:.0f} of {} points\n", ln_like_max,
                   effective_sample_size(), samples.size());
  if (!names.empty() && !samples.empty()) {
    for (std::size_t i = 0; i < names.size() && i < samples.front().theta.size(); ++i) {
      const double m = weighted_quantile(i, 0.5);
      s += fmt::format("  {:<24} {:>14.6g}  -{:.3g} +{:.3g}\n", names[i], m, m - weighted_quantile(i, 0.15865),
                       weighted_quantile(i, 0.84135) - m);
    }
  }
  return s;
}

}  // namespace apsides

namespace apsides {

SignalHint sinusoid_hint(const VelocityData& data, double period_days) {
  SignalHint h;
  h.period_days = period_days;
  const int ni = static_cast<int>(data.n_instruments());
  const int m = 2 + ni;
  if (!(period_days > 0.0) || data.size() < static_cast<std::size_t>(m) + 1) return h;
  // v_i = a cos(theta_i) + b sin(theta_i) + offset_inst, theta = 2 pi t / P; weights 1/s^2.
  Eigen::MatrixXd normal = Eigen::MatrixXd::Zero(m, m);
  Eigen::VectorXd rhs = Eigen::VectorXd::Zero(m);
  Eigen::VectorXd row(m);
  for (std::size_t i = 0; i < data.size(); ++i) {
    const double th = 2.0 * constants::kPi * data.time_days[i] / period_days;
    row.setZero();
    row[0] = std::cos(th);
    row[1] = std::sin(th);
    row[2 + data.instrument[i]] = 1.0;
    const double w = 1.0 / (data.uncertainty_m_s[i] * data.uncertainty_m_s[i]);
    normal.noalias() += w * row * row.transpose();
    rhs += w * data.velocity_m_s[i] * row;
  }
  const Eigen::LDLT<Eigen::MatrixXd> ldlt(normal);
  if (ldlt.info() != Eigen::Success) return h;
  const Eigen::VectorXd x = ldlt.solve(rhs);
  if (!x.allFinite()) return h;
  // A circular orbit: v = -K sin(2 pi (t - t_conj) / P) (zero and falling at conjunction),
  // = K sin(th_c) cos(th) - K cos(th_c) sin(th): a = K sin th_c, b = -K cos th_c.
  h.semi_amplitude_m_s = std::hypot(x[0], x[1]);
  h.t_conj_days = std::atan2(x[0], -x[1]) / (2.0 * constants::kPi) * period_days;
  return h;
}

std::string kass_raftery_wording(double ln_bayes) {
  if (std::isnan(ln_bayes)) return "";
  if (ln_bayes < 0.0) return "favours the simpler model";
  if (ln_bayes < 1.0) return "barely worth mentioning";
  if (ln_bayes < 3.0) return "positive";
  if (ln_bayes < 5.0) return "strong";
  return "very strong";
}

double bic(double ln_like_max, int n_params, std::size_t n_points) {
  return n_params * std::log(static_cast<double>(n_points)) - 2.0 * ln_like_max;
}

double aicc(double ln_like_max, int n_params, std::size_t n_points) {
  const double n = static_cast<double>(n_points), kk = n_params;
  if (n <= kk + 1.0) return std::numeric_limits<double>::quiet_NaN();
  return 2.0 * kk - 2.0 * ln_like_max + 2.0 * kk * (kk + 1.0) / (n - kk - 1.0);
}

}  // namespace apsides

namespace apsides {

std::string CompareOptions::Validate() const {
  if (max_planets < 0 || max_planets > 9) return fmt::format("max_planets = {}: must be in 0..9", max_planets);
  if (min_planets < 0 || min_planets > max_planets)
    return fmt::format("min_planets = {}: must be in 0..max_planets ({})", min_planets, max_planets);
  if (!std::isfinite(bayes_threshold)) return fmt::format("bayes_threshold = {}: must be finite", bayes_threshold);
  return nested.Validate();
}

namespace {

// Mode-jump targets: the caller's signals (a search's planets) and the periodogram's 20
// strongest peaks with the sinusoid's K and phase. The caller's signals share half the
// weight, the peaks the other half (all of it when there is only one group).
std::vector<WeightedHint> comparison_hints(const VelocityData& data, const CompareOptions& options) {
  std::vector<WeightedHint> hints;
  for (const SignalHint& h : options.search_hints) hints.push_back({h, 1.0});
  if (options.max_planets > 0 && data.size() >= data.n_instruments() + 3) {
    PeriodogramOptions po;
    po.n_peaks = 20;
    po.n_window_peaks = 0;
    po.threads = options.nested.threads;
    const PeriodogramResult pg = compute_periodogram(data, po);
    const double w = options.search_hints.empty() || pg.peaks.empty()
                         ? 1.0
                         : static_cast<double>(options.search_hints.size()) / static_cast<double>(pg.peaks.size());
    for (const Peak& pk : pg.peaks) hints.push_back({sinusoid_hint(data, pk.period_days), w});
  }
  return hints;
}

// Nested sampling of the k-planet model: one comparison row (its Bayes factor against
// the previous row is filled by the caller).
ComparisonRow compare_one(const VelocityData& data, const ModelLayout& base_layout,
                          const std::function<ModelPriors(const ModelLayout&)>& priors_for, const CompareOptions& options,
                          const std::optional<EvidenceTransits>& et, std::span<const WeightedHint> hints, int k,
                          const std::function<void(int k, const std::string& status)>& on_status,
                          std::vector<std::string>& prior_notes, std::size_t& n_points_total) {
  ModelLayout layout = base_layout;
  layout.n_planets = k;
  ModelPriors priors = priors_for(layout);
  if (et) priors.label_fixed = et->times.planets_with_times(k);
  const KeplerianModel model(data, layout);
  const RvEvidenceProblem prob = make_rv_evidence_problem(model, priors, options.phase_conjunction, et ? &*et : nullptr, hints);
  n_points_total = data.size() + prob.n_transit_points;
  const int n_free = prob.n_free_params;
  if (static_cast<std::size_t>(n_free) + 1 >= data.size())
    throw InputError(fmt::format("compare: {} planet(s) need {} free parameters but the data have only {} points", k,
                                 n_free, data.size()));
  if (on_status)
    on_status(k, prob.n_integrated_params > 0
                     ? fmt::format("{} planet(s): {} free parameters ({} offsets integrated analytically)", k, n_free,
                                   prob.n_integrated_params)
                     : fmt::format("{} planet(s): {} free parameters", k, n_free));
  NestedOptions nopt = options.nested;
  if (nopt.live_points < prob.problem.dimension + 1) nopt.live_points = prob.problem.dimension + 1;
  ComparisonRow row;
  row.n_planets = k;
  row.n_params = n_free;
  row.nested = run_nested_sampling(prob.problem, nopt);
  row.ordering_note = prob.ordering_note;
  row.ln_evidence = row.nested.ln_evidence + prob.ln_evidence_offset;
  row.ln_evidence_err = row.nested.ln_evidence_err;
  row.information_nats = row.nested.information_nats;
  row.ln_like_max = row.nested.ln_like_max;
  row.bic = bic(row.ln_like_max, row.n_params, n_points_total);
  row.aicc = aicc(row.ln_like_max, row.n_params, n_points_total);
  row.seconds = row.nested.seconds;
  row.likelihood_calls = row.nested.likelihood_calls;
  prior_notes = prob.prior_notes;  // the largest model's prior lines cover every smaller one
  return row;
}

// A model with one planet more contains the smaller one (K -> 0), so its evidence can
// fall below the smaller model's only by the prior mass of a negligible K (about ln 0.1
// with the default K prior) -- not by many nats. A much lower ln Z means nested sampling
// lost the smaller model's region: say so rather than let the row read as evidence.
void mark_unreliable(CompareResult& res) {
  for (std::size_t k = 1; k < res.rows.size(); ++k) {
    if (!(res.rows[k].ln_bayes_vs_previous < -5.0)) continue;
    res.rows[k].unreliable = true;
    res.rows[k].bayes_wording = "UNRELIABLE (sampler lost the smaller model's region)";
    res.notes.push_back(fmt::format(
        "UNRELIABLE: ln Z({}) is {:.1f} below ln Z({}), although {} planets include {} (a planet with K -> 0): "
        "nested sampling lost that region. Do not read ln B({} vs {}) as evidence; rerun with more live points "
        "(--live-points) or another --seed.",
        res.rows[k].n_planets, -res.rows[k].ln_bayes_vs_previous, res.rows[k - 1].n_planets, res.rows[k].n_planets,
        res.rows[k - 1].n_planets, res.rows[k].n_planets, res.rows[k - 1].n_planets));
  }
}

void select_and_note(CompareResult& res, const CompareOptions& options, const std::optional<EvidenceTransits>& et,
                     std::size_t n_points_total) {
  res.selected_n_planets = options.min_planets;
  for (std::size_t k = 1; k < res.rows.size(); ++k) {
    if (res.rows[k].ln_bayes_vs_previous > options.bayes_threshold &&
        res.rows[k].nested.termination == NestedTermination::kConverged)
      res.selected_n_planets = res.rows[k].n_planets;
  }
  res.selection_rule = fmt::format(
      "the largest k whose ln B(k vs k-1) > {:g} (Kass & Raftery 1995: "
      "> 5 is \"very strong\")",
      options.bayes_threshold);
  bool failed = false;
  for (const auto& r : res.rows)
    if (r.nested.termination != NestedTermination::kConverged) failed = true;
  res.message = failed ? "Nested sampling did not converge for every model: see the rows' messages."
                       : fmt::format("Selected {} planet(s).", res.selected_n_planets);
  res.notes.push_back(
      "Bayes factors depend on the prior ranges (period, K) stated above: a wider prior lowers the evidence of "
      "every model with planets.");
  res.notes.push_back(
      "A supported signal is not necessarily a planet: stellar activity and rotation, and aliases of a true "
      "period (1 d, 1 yr, the window), can also be preferred; check activity indicators and the periodogram.");
  res.notes.push_back("max ln L is the best point nested sampling visited (a lower bound of the true maximum).");
  if (et)
    res.notes.push_back(fmt::format(
        "Transit times ({}) are in every model's likelihood, ln L and BIC/AICc (n = {} velocities + transit times): "
        "the transiting planet keeps its letter in every model, and a model without it explains the times by a "
        "transit-only ephemeris, so the Bayes factors compare velocity signals.",
        et->times.size(), n_points_total));
  res.n_points = n_points_total;
}

}  // namespace

CompareResult compare_planet_counts(const VelocityData& data, const ModelLayout& base_layout,
                                    const std::function<ModelPriors(const ModelLayout&)>& priors_for,
                                    const CompareOptions& options,
                                    const std::function<void(int k, const std::string& status)>& on_status,
                                    const TransitData* transits) {
  if (const std::string v = options.Validate(); !v.empty()) throw InputError("compare: " + v);
  const auto t_start = std::chrono::steady_clock::now();
  CompareResult res;
  // Transit times: the largest letter they name sets the priors of transit-only planets.
  std::optional<EvidenceTransits> et;
  if (transits != nullptr && transits->size() > 0) {
    int letters = 0;
    for (int j = 0; j < 26; ++j)
      if (transits->for_planet(planet_label(j)).size() > 0) letters = j + 1;
    ModelLayout wide = base_layout;
    wide.n_planets = std::max(letters, 1);
    et = EvidenceTransits{*transits, priors_for(wide), wide};
  }
  std::size_t n_points_total = data.size();
  const std::vector<WeightedHint> hints = comparison_hints(data, options);
  std::vector<std::string> prior_notes;
  for (int k = options.min_planets; k <= options.max_planets; ++k) {
    ComparisonRow row =
        compare_one(data, base_layout, priors_for, options, et, hints, k, on_status, prior_notes, n_points_total);
    if (!res.rows.empty()) {
      const ComparisonRow& prev = res.rows.back();
      row.ln_bayes_vs_previous = row.ln_evidence - prev.ln_evidence;
      row.ln_bayes_err = std::hypot(row.ln_evidence_err, prev.ln_evidence_err);
      row.bayes_wording = kass_raftery_wording(row.ln_bayes_vs_previous);
    }
    res.rows.push_back(std::move(row));
  }
  for (const auto& p : prior_notes) res.notes.push_back("prior: " + p);
  mark_unreliable(res);
  select_and_note(res, options, et, n_points_total);
  res.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t_start).count();
  return res;
}

std::string CompareResult::BriefReport() const {
  std::string s;
  for (const auto& r : rows)
    s += fmt::format("{}: ln Z = {:.2f} +- {:.2f}; ", r.n_planets, r.ln_evidence, r.ln_evidence_err);
  return s + fmt::format("selected {} planet(s)", selected_n_planets);
}

std::string CompareResult::FullReport() const {
  std::string s = fmt::format("{:>7} {:>6} {:>11} {:>10} {:>10} {:>16} {:>8} {:>14}  {}\n", "planets", "params",
                              "max ln L", "BIC", "AICc", "ln Z", "H", "ln B vs k-1", "evidence (Kass & Raftery)");
  for (const auto& r : rows) {
    s += fmt::format("{:>7} {:>6} {:>11.2f} {:>10.2f} {:>10.2f} {:>9.2f} +- {:4.2f} {:>8.1f} ", r.n_planets, r.n_params,
                     r.ln_like_max, r.bic, r.aicc, r.ln_evidence, r.ln_evidence_err, r.information_nats);
    if (std::isnan(r.ln_bayes_vs_previous))
      s += fmt::format("{:>14}  {}\n", "-", "");
    else
      s += fmt::format("{:>7.2f} +- {:4.2f}  {}\n", r.ln_bayes_vs_previous, r.ln_bayes_err, r.bayes_wording);
  }
  s += fmt::format("Selected: {} planet(s) — rule: {}.\n", selected_n_planets, selection_rule);
  for (const auto& r : rows) {
    if (r.nested.termination != NestedTermination::kConverged)
      s += fmt::format("warning: {} planet(s): {}\n", r.n_planets, r.nested.message);
    if (r.unreliable)
      s += fmt::format("warning: {} planet(s): ln Z far below the smaller model's, which it contains: unreliable "
                       "(see the notes)\n", r.n_planets);
  }
  return s;
}

}  // namespace apsides
