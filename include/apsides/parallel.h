// Independent work units spread over threads of one process and, when apsides is built
// with Open MPI (CMake option APSIDES_MPI) and started by `mpirun`, over MPI ranks on
// several machines. `apsides limits` farms out grid cells, `apsides survey` stars.
//
// Model: a dynamic work queue. The root (rank 0) holds the list of units; every compute
// thread of every rank takes the next unit when it has finished one, so slow units
// (a star with many planets, a cell where every injection is fitted) do not hold up the
// rest. Results travel back to the root as bytes; the root alone calls `on_result` and
// writes files. A unit's result must depend on the unit only (its own random stream,
// no thread or rank identity): then outputs are bitwise the same for any number of
// threads or ranks.
//
// MPI protocol (only the root's main thread calls MPI, MPI_THREAD_FUNNELED): a worker
// rank sends "ready" (tag 1), or a finished unit's result (tag 2: 8-byte unit id then the
// bytes); the root answers each with the next unit id (tag 3: 8 bytes; -1 = no more
// work). Waiting ranks poll with MPI_Iprobe / MPI_Test and a 1 ms sleep instead of
// blocking, because Open MPI's blocking calls spin a core that the compute threads need.
// On the root, compute threads take units from the same queue while the main thread
// serves the other ranks, collects results and runs `on_tick` (checkpoints).
#pragma once

#include <cstddef>
#include <functional>
#include <string>
#include <vector>

namespace apsides {

// The process's place in a parallel run. Constructing it starts MPI (MPI_Init_thread)
// when apsides was built with MPI and the environment shows an MPI launcher
// (OMPI_COMM_WORLD_SIZE, PMIX_RANK or PMI_SIZE); otherwise it is a single process and
// MPI is never touched, so plain runs behave exactly as without MPI. The destructor
// finalises MPI. At most one session per process.
class ParallelSession {
 public:
  ParallelSession();
  ~ParallelSession();
  ParallelSession(const ParallelSession&) = delete;
  ParallelSession& operator=(const ParallelSession&) = delete;

  int rank() const { return rank_; }
  int size() const { return size_; }
  bool is_root() const { return rank_ == 0; }
  bool uses_mpi() const { return mpi_; }

  // Compiled with MPI support (APSIDES_MPI=ON and Open MPI found).
  static bool mpi_built();
  // The environment shows an MPI launcher (mpirun, srun).
  static bool launched_by_mpi();
  // Sends `text` from the root to every rank (a no-op without MPI); returns it on all.
  std::string broadcast(const std::string& text) const;
  // Waits for every rank (a no-op without MPI).
  void barrier() const;

 private:
  int rank_ = 0;
  int size_ = 1;
  bool mpi_ = false;
};

struct FarmOptions {
  int threads = 1;            // compute threads in each process, >= 1
  double tick_seconds = 2.0;  // on_tick is called on the root at about this period, > 0
  std::string Validate() const;
};

struct FarmStats {
  std::size_t units_done = 0;        // results received by the root
  double wall_seconds = 0.0;         // on the root
  std::vector<std::size_t> per_rank; // units computed by each rank (root only)
};

// Runs compute(unit) for every unit in `units` (only the root's list is used; other ranks
// pass anything, e.g. an empty list). `session` null: this process's threads only (e.g. a
// stage inside a job that is itself one unit of a farm). on_result(unit, bytes) runs on the root's main
// thread, one call at a time, in completion order; on_tick() there every tick_seconds
// and once at the end. `compute` runs on any thread of any rank and must not throw: an
// escaping exception ends the run (MPI_Abort under MPI, rethrown otherwise).
FarmStats run_farm(const ParallelSession* session, const std::vector<long>& units,
                   const std::function<std::string(long)>& compute,
                   const std::function<void(long, const std::string&)>& on_result,
                   const std::function<void()>& on_tick, const FarmOptions& options);

}  // namespace apsides
