// The MPI side of parallel.h (compiled only with APSIDES_MPI=ON). Only the main thread of
// each process calls MPI (MPI_THREAD_FUNNELED).
// The C API only (Open MPI and MPICH would otherwise pull in their deprecated C++ bindings).
#define OMPI_SKIP_MPICXX 1
#define MPICH_SKIP_MPICXX 1
#include <mpi.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <stdexcept>
#include <thread>

#include "apsides/error.h"
#include "parallel/farm_internal.h"

namespace apsides::detail {
namespace {

constexpr int kTagReady = 1;   // worker -> root: one compute thread wants a unit
constexpr int kTagResult = 2;  // worker -> root: unit id (8 bytes) + result; also asks for the next unit
constexpr int kTagWork = 3;    // root -> worker: unit id (8 bytes), -1 = no more work
constexpr int kTagBye = 4;     // worker -> root: every request answered, worker done

void pause_briefly() { std::this_thread::sleep_for(std::chrono::milliseconds(1)); }

void send_unit(int dest, long long unit) { MPI_Send(&unit, 1, MPI_LONG_LONG, dest, kTagWork, MPI_COMM_WORLD); }

// Other ranks wait on this one: a failure cannot be returned, only reported and the job ended.
[[noreturn]] void fail(std::exception_ptr e) {
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  int code = 1;
  try {
    std::rethrow_exception(e);
  } catch (const InputError& ex) {
    std::fprintf(stderr, "apsides: %s\n", ex.what());
    code = 2;
  } catch (const std::exception& ex) {
    std::fprintf(stderr, "apsides: rank %d: %s\n", rank, ex.what());
  } catch (...) {
    std::fprintf(stderr, "apsides: rank %d: unknown error\n", rank);
  }
  std::fflush(stderr);
  mpi_abort(code);
}

}  // namespace

bool mpi_start(int& rank, int& size) {
  int initialised = 0;
  MPI_Initialized(&initialised);
  if (!initialised) {
    int provided = 0;
    MPI_Init_thread(nullptr, nullptr, MPI_THREAD_FUNNELED, &provided);
    if (provided < MPI_THREAD_FUNNELED) {
      MPI_Finalize();
      throw std::runtime_error("the MPI library does not provide MPI_THREAD_FUNNELED");
    }
  }
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  MPI_Comm_size(MPI_COMM_WORLD, &size);
  return true;
}

void mpi_stop() {
  int finalised = 0;
  MPI_Finalized(&finalised);
  if (!finalised) MPI_Finalize();
}

std::string mpi_broadcast(const std::string& text) {
  long long n = static_cast<long long>(text.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, 0, MPI_COMM_WORLD);
  std::string out = text;
  out.resize(static_cast<std::size_t>(n));
  if (n > 0) MPI_Bcast(out.data(), static_cast<int>(n), MPI_CHAR, 0, MPI_COMM_WORLD);
  return out;
}

void mpi_barrier() {
  // A polling barrier: MPI_Barrier would spin a core while others still work.
  MPI_Request req;
  MPI_Ibarrier(MPI_COMM_WORLD, &req);
  int done = 0;
  while (!done) {
    MPI_Test(&req, &done, MPI_STATUS_IGNORE);
    if (!done) pause_briefly();
  }
}

void mpi_abort(int code) { MPI_Abort(MPI_COMM_WORLD, code); std::abort(); }

FarmStats mpi_root_farm(const ParallelSession& session, const std::vector<long>& units,
                        const std::function<std::string(long)>& compute,
                        const std::function<void(long, const std::string&)>& on_result,
                        const std::function<void()>& on_tick, const FarmOptions& options) {
  FarmStats stats;
  stats.per_rank.assign(static_cast<std::size_t>(session.size()), 0);
  const auto t0 = std::chrono::steady_clock::now();
  std::mutex source_mutex;
  std::size_t next = 0;
  auto take = [&](long& unit) {
    std::lock_guard<std::mutex> lock(source_mutex);
    if (next >= units.size()) return false;
    unit = units[next++];
    return true;
  };
  LocalPool pool(compute, options.threads, take);
  int workers_left = session.size() - 1;
  auto last_tick = std::chrono::steady_clock::now();
  std::vector<char> buffer;
  try {
    while (stats.units_done < units.size() || workers_left > 0) {
      bool busy = false;
      long unit = 0;
      std::string bytes;
      while (pool.wait_result(unit, bytes, 0.0)) {  // the root's own threads
        on_result(unit, bytes);
        ++stats.units_done;
        ++stats.per_rank[0];
        busy = true;
      }
      if (auto e = pool.error()) std::rethrow_exception(e);
      int flag = 0;
      MPI_Status st;
      MPI_Iprobe(MPI_ANY_SOURCE, MPI_ANY_TAG, MPI_COMM_WORLD, &flag, &st);
      if (flag) {
        busy = true;
        int count = 0;
        MPI_Get_count(&st, MPI_BYTE, &count);
        buffer.resize(static_cast<std::size_t>(std::max(count, 1)));
        MPI_Recv(buffer.data(), count, MPI_BYTE, st.MPI_SOURCE, st.MPI_TAG, MPI_COMM_WORLD, MPI_STATUS_IGNORE);
        if (st.MPI_TAG == kTagBye) {
          --workers_left;
        } else {
          if (st.MPI_TAG == kTagResult) {
            long long id = 0;
            std::memcpy(&id, buffer.data(), sizeof id);
            on_result(static_cast<long>(id), std::string(buffer.data() + sizeof id, static_cast<std::size_t>(count) - sizeof id));
            ++stats.units_done;
            ++stats.per_rank[static_cast<std::size_t>(st.MPI_SOURCE)];
          }
          long u = 0;
          send_unit(st.MPI_SOURCE, take(u) ? static_cast<long long>(u) : -1LL);
        }
      }
      if (std::chrono::duration<double>(std::chrono::steady_clock::now() - last_tick).count() >= options.tick_seconds) {
        on_tick();
        last_tick = std::chrono::steady_clock::now();
      }
      if (!busy) pause_briefly();
    }
  } catch (...) {
    fail(std::current_exception());
  }
  pool.stop_and_join();
  on_tick();
  stats.wall_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return stats;
}

void mpi_worker_farm(const std::function<std::string(long)>& compute, const FarmOptions& options) {
  const int threads = options.threads;
  std::mutex mutex;
  std::condition_variable cv;
  std::deque<long> assigned;
  int refusals = 0;  // -1 answers: one per compute thread ends it
  auto take = [&](long& unit) {
    std::unique_lock<std::mutex> lock(mutex);
    cv.wait(lock, [&] { return !assigned.empty() || refusals >= threads; });
    if (assigned.empty()) return false;
    unit = assigned.front();
    assigned.pop_front();
    return true;
  };
  // Each compute thread has one request outstanding at any time.
  for (int i = 0; i < threads; ++i) MPI_Send(nullptr, 0, MPI_BYTE, 0, kTagReady, MPI_COMM_WORLD);
  LocalPool pool(compute, threads, take);
  int outstanding = threads;
  std::vector<char> message;
  while (outstanding > 0 || !pool.finished()) {
    bool busy = false;
    if (outstanding > 0) {
      int flag = 0;
      MPI_Iprobe(0, kTagWork, MPI_COMM_WORLD, &flag, MPI_STATUS_IGNORE);
      if (flag) {
        long long unit = 0;
        MPI_Recv(&unit, 1, MPI_LONG_LONG, 0, kTagWork, MPI_COMM_WORLD, MPI_STATUS_IGNORE);
        --outstanding;
        {
          std::lock_guard<std::mutex> lock(mutex);
          if (unit >= 0) assigned.push_back(static_cast<long>(unit));
          else ++refusals;
        }
        cv.notify_all();
        busy = true;
      }
    }
    long unit = 0;
    std::string bytes;
    if (pool.wait_result(unit, bytes, 0.0)) {
      const long long id = unit;
      message.resize(sizeof id + bytes.size());
      std::memcpy(message.data(), &id, sizeof id);
      std::memcpy(message.data() + sizeof id, bytes.data(), bytes.size());
      MPI_Send(message.data(), static_cast<int>(message.size()), MPI_BYTE, 0, kTagResult, MPI_COMM_WORLD);
      ++outstanding;
      busy = true;
    }
    if (auto e = pool.error()) fail(e);
    if (!busy) pause_briefly();
  }
  pool.stop_and_join();
  MPI_Send(nullptr, 0, MPI_BYTE, 0, kTagBye, MPI_COMM_WORLD);
}

}  // namespace apsides::detail
