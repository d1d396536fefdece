// Internal to src/parallel: the thread pool every process runs, and the MPI transport
// (compiled only with APSIDES_MPI; mpi_farm.cpp).
#pragma once

#include <chrono>
#include <condition_variable>
#include <deque>
#include <exception>
#include <functional>
#include <mutex>
#include <string>
#include <thread>
#include <utility>
#include <vector>

#include "apsides/parallel.h"

namespace apsides::detail {

// Compute threads that take units from `source` (called under no lock of ours; it must be
// thread-safe and return false when there is no more work) and queue their results.
class LocalPool {
 public:
  using Source = std::function<bool(long&)>;
  LocalPool(const std::function<std::string(long)>& compute, int threads, Source source);
  ~LocalPool();
  LocalPool(const LocalPool&) = delete;
  LocalPool& operator=(const LocalPool&) = delete;

  // Waits up to `seconds` for a result; true with one when there is one.
  bool wait_result(long& unit, std::string& bytes, double seconds);
  // Every thread has ended (no more results will come once the queue is drained).
  bool finished() const;
  // Stops taking new units (after an error elsewhere) and joins the threads.
  void stop_and_join();
  // The first exception a compute call threw, if any.
  std::exception_ptr error() const;

 private:
  void work();
  std::function<std::string(long)> compute_;
  Source source_;
  mutable std::mutex mutex_;
  std::condition_variable cv_;
  std::deque<std::pair<long, std::string>> results_;
  std::vector<std::thread> threads_;
  int running_ = 0;
  bool stop_ = false;
  std::exception_ptr error_;
};

#ifdef APSIDES_HAVE_MPI
bool mpi_start(int& rank, int& size);
void mpi_stop();
std::string mpi_broadcast(const std::string& text);
void mpi_barrier();
[[noreturn]] void mpi_abort(int code);
FarmStats mpi_root_farm(const ParallelSession& session, const std::vector<long>& units,
                        const std::function<std::string(long)>& compute,
                        const std::function<void(long, const std::string&)>& on_result,
                        const std::function<void()>& on_tick, const FarmOptions& options);
void mpi_worker_farm(const std::function<std::string(long)>& compute, const FarmOptions& options);
#endif

}  // namespace apsides::detail
