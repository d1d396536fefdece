// Work units over threads (and MPI ranks when built with it): parallel.h.
#include <fmt/format.h>

#include <cstdlib>
#include <stdexcept>

#include "apsides/error.h"
#include "parallel/farm_internal.h"

namespace apsides {

namespace detail {

LocalPool::LocalPool(const std::function<std::string(long)>& compute, int threads, Source source)
    : compute_(compute), source_(std::move(source)) {
  running_ = threads;
  for (int i = 0; i < threads; ++i) threads_.emplace_back([this] { work(); });
}

LocalPool::~LocalPool() { stop_and_join(); }

void LocalPool::work() {
  for (;;) {
    {
      std::lock_guard<std::mutex> lock(mutex_);
      if (stop_) break;
    }
    long unit = 0;
    if (!source_(unit)) break;
    try {
      std::string bytes = compute_(unit);
      std::lock_guard<std::mutex> lock(mutex_);
      results_.emplace_back(unit, std::move(bytes));
    } catch (...) {
      std::lock_guard<std::mutex> lock(mutex_);
      if (!error_) error_ = std::current_exception();
      stop_ = true;
      break;
    }
    cv_.notify_all();
  }
  {
    std::lock_guard<std::mutex> lock(mutex_);
    --running_;
  }
  cv_.notify_all();
}

bool LocalPool::wait_result(long& unit, std::string& bytes, double seconds) {
  std::unique_lock<std::mutex> lock(mutex_);
  cv_.wait_for(lock, std::chrono::duration<double>(seconds), [this] { return !results_.empty() || running_ == 0; });
  if (results_.empty()) return false;
  unit = results_.front().first;
  bytes = std::move(results_.front().second);
  results_.pop_front();
  return true;
}

bool LocalPool::finished() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return running_ == 0 && results_.empty();
}

void LocalPool::stop_and_join() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stop_ = true;
  }
  for (auto& t : threads_)
    if (t.joinable()) t.join();
}

std::exception_ptr LocalPool::error() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return error_;
}

}  // namespace detail

namespace {

bool env_set(const char* name) {
  const char* v = std::getenv(name);
  return v != nullptr && *v != '\0';
}

bool g_session_alive = false;

// One process, `threads` compute threads; the caller's thread collects and ticks.
FarmStats local_farm(const std::vector<long>& units, const std::function<std::string(long)>& compute,
                     const std::function<void(long, const std::string&)>& on_result,
                     const std::function<void()>& on_tick, const FarmOptions& options) {
  FarmStats stats;
  stats.per_rank.assign(1, 0);
  const auto t0 = std::chrono::steady_clock::now();
  std::mutex source_mutex;
  std::size_t next = 0;
  detail::LocalPool pool(compute, options.threads, [&](long& unit) {
    std::lock_guard<std::mutex> lock(source_mutex);
    if (next >= units.size()) return false;
    unit = units[next++];
    return true;
  });
  auto last_tick = std::chrono::steady_clock::now();
  try {
    while (stats.units_done < units.size()) {
      long unit = 0;
      std::string bytes;
      if (pool.wait_result(unit, bytes, 0.2)) {
        on_result(unit, bytes);
        ++stats.units_done;
        ++stats.per_rank[0];
      } else if (pool.finished()) {
        break;  // a compute call failed: no more results
      }
      if (std::chrono::duration<double>(std::chrono::steady_clock::now() - last_tick).count() >= options.tick_seconds) {
        on_tick();
        last_tick = std::chrono::steady_clock::now();
      }
    }
  } catch (...) {
    pool.stop_and_join();
    throw;
  }
  pool.stop_and_join();
  if (auto e = pool.error()) std::rethrow_exception(e);
  on_tick();
  stats.wall_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return stats;
}

}  // namespace

std::string FarmOptions::Validate() const {
  if (threads < 1 || threads > 1024) return fmt::format("threads = {}: must be in [1, 1024]", threads);
  if (!(tick_seconds > 0)) return fmt::format("tick_seconds = {}: must be > 0", tick_seconds);
  return "";
}

bool ParallelSession::mpi_built() {
#ifdef APSIDES_HAVE_MPI
  return true;
#else
  return false;
#endif
}

bool ParallelSession::launched_by_mpi() {
  return env_set("OMPI_COMM_WORLD_SIZE") || env_set("PMIX_RANK") || env_set("PMI_SIZE");
}

ParallelSession::ParallelSession() {
  if (g_session_alive) throw std::logic_error("ParallelSession: only one per process");
  g_session_alive = true;
#ifdef APSIDES_HAVE_MPI
  if (launched_by_mpi()) mpi_ = detail::mpi_start(rank_, size_);
#endif
}

ParallelSession::~ParallelSession() {
#ifdef APSIDES_HAVE_MPI
  if (mpi_) detail::mpi_stop();
#endif
  g_session_alive = false;
}

std::string ParallelSession::broadcast(const std::string& text) const {
#ifdef APSIDES_HAVE_MPI
  if (mpi_ && size_ > 1) return detail::mpi_broadcast(text);
#endif
  return text;
}

void ParallelSession::barrier() const {
#ifdef APSIDES_HAVE_MPI
  if (mpi_ && size_ > 1) detail::mpi_barrier();
#endif
}

FarmStats run_farm(const ParallelSession* session, const std::vector<long>& units,
                   const std::function<std::string(long)>& compute,
                   const std::function<void(long, const std::string&)>& on_result,
                   const std::function<void()>& on_tick, const FarmOptions& options) {
  if (const std::string msg = options.Validate(); !msg.empty()) throw InputError("farm options: " + msg);
#ifdef APSIDES_HAVE_MPI
  if (session && session->uses_mpi() && session->size() > 1) {
    if (session->is_root()) return detail::mpi_root_farm(*session, units, compute, on_result, on_tick, options);
    detail::mpi_worker_farm(compute, options);
    return {};
  }
#endif
  (void)session;
  return local_farm(units, compute, on_result, on_tick, options);
}

}  // namespace apsides
