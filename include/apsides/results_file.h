// The HDF5 results file: one file per run, readable by h5py, astropy or any HDF5 tool.
//
// Layout (every dataset carries "unit" and "description" string attributes):
//   /data/time_d, velocity_ms, uncertainty_ms, instrument (index), instrument_names
//        attributes: reference_epoch_bjd
//   /project/text                 the project file as read
//   /parameters/names, units, priors
//   /map/theta                    the start point (MAP fit) in parameter order
//   /chains/positions             (stored steps x walkers x parameters), chunked, extendible,
//                                 shuffle + deflate (lossless: every stored number is the
//                                 sampler's float64)
//   /chains/log_prob              (stored steps x walkers), same storage
//   /chains/step                  the sampler step of each stored row: stride, 2 stride, ...
//   /chains/state/positions, log_prob, accepted   the sampler state at the last checkpoint
//   /chains/state/diagnostic_rows, diagnostic_steps   off-stride rows the convergence
//                                 diagnostics still use (for --resume); gone once the
//                                 diagnostics' own thinning reaches the stride
//        /chains attributes: steps (sampler steps done), stride, walkers, seed,
//        burn_in_steps, termination, message
//   /derived/<name>               derived-quantity chains over the kept samples
//   /diagnostics/rhat, ess_bulk, ess_tail, tau     per parameter
//   /periodograms, /comparison, /nested_samples    for the other stages (free layout)
//
// What is stored, and at what stride. The chain is stored every `stride` steps
// (kDefaultChainStride = 16 for `apsides sample`): those are the kept draws. Every
// posterior number (derived chains, summaries, report, figures) is computed from stored
// steps after the burn-in (at most 200 000 draws: all stored steps after burn-in when they
// fit, else every 2nd, 3rd, ... stored step), so no kept draw is missing from the file.
// The stride is fixed before the run (not tied to the autocorrelation time tau) and far
// below tau on converged runs (the demo: tau ~ 180 steps), so the kept draws carry nearly
// the whole chain's effective sample size. Measured on the demo (42 000 steps x 64 walkers
// x 16 parameters): see README, "The results file". The convergence diagnostics (R-hat,
// ESS, tau) are computed by the sampler during the run, on its own power-of-two thinning
// of every step (sampler.h), not from the stored rows.
//
// Crash safety: between checkpoints nothing is written; at a checkpoint the new chain
// rows are appended, the off-stride diagnostic rows written into slots the last
// checkpoint does not use, the state rewritten, `steps` set, and the file flushed. A
// `kill -9` at any other moment leaves the file as of the last checkpoint, which h5py
// opens and `apsides sample --resume` continues bitwise as if never stopped (rows past
// `steps`, if any, are dropped).
#pragma once

#include <cstdint>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/sampler.h"

namespace apsides {

// Steps between stored chain rows in the files `apsides sample` writes (see above).
inline constexpr long kDefaultChainStride = 16;

class ResultsFile {
 public:
  enum class Mode { kCreate, kReadWrite, kReadOnly };
  // kCreate truncates. Opening a missing or non-HDF5 file throws InputError naming it.
  ResultsFile(const std::string& path, Mode mode);
  ~ResultsFile();
  ResultsFile(const ResultsFile&) = delete;
  ResultsFile& operator=(const ResultsFile&) = delete;

  const std::string& path() const { return path_; }

  // ---- A small writer/reader API for any stage. Paths like "/periodograms/rv/power";
  // missing groups are created; an existing dataset at the path is replaced.
  bool exists(const std::string& object_path) const;
  void create_group(const std::string& group_path);
  void write_vector(const std::string& path, std::span<const double> values, const std::string& unit,
                    const std::string& description);
  void write_ints(const std::string& path, std::span<const long long> values, const std::string& description);
  // Row-major matrix rows x cols.
  void write_matrix(const std::string& path, std::span<const double> values, std::size_t rows, std::size_t cols,
                    const std::string& unit, const std::string& description);
  void write_strings(const std::string& path, const std::vector<std::string>& values, const std::string& description);
  void write_text(const std::string& path, const std::string& text, const std::string& description);
  // Attributes on a group or dataset (replaced if present).
  void set_attribute(const std::string& object_path, const std::string& name, const std::string& value);
  void set_attribute(const std::string& object_path, const std::string& name, double value);
  void set_attribute(const std::string& object_path, const std::string& name, long long value);

  std::vector<double> read_vector(const std::string& path) const;  // any shape, flattened
  std::vector<long long> read_ints(const std::string& path) const;
  std::vector<std::size_t> shape(const std::string& path) const;
  std::vector<std::string> read_strings(const std::string& path) const;
  std::string read_text(const std::string& path) const;
  std::string string_attribute(const std::string& object_path, const std::string& name) const;
  double double_attribute(const std::string& object_path, const std::string& name) const;
  long long int_attribute(const std::string& object_path, const std::string& name) const;
  bool has_attribute(const std::string& object_path, const std::string& name) const;
  void flush();

  // ---- Standard groups.
  void write_velocity_data(const VelocityData& data);
  void write_project_text(const std::string& text);
  void write_parameters(const std::vector<std::string>& names, const std::vector<std::string>& units,
                        const std::vector<std::string>& priors);

  // ---- Chains, streamed (ChainWriter below does this for a sampler).
  // `stride` >= 1: steps stride, 2 stride, ... are stored.
  void create_chains(int walkers, std::size_t dim, std::uint64_t seed, const std::string& options_text,
                     long stride = kDefaultChainStride);
  // Appends stored rows (each walkers x dim positions and walkers log-probs) after the
  // rows of the `steps` attribute: the steps (rows + 1) stride, (rows + 2) stride, ...
  void append_chain_rows(const std::vector<std::vector<double>>& positions,
                         const std::vector<std::vector<double>>& log_prob);
  // Rewrites the saved state, sets `steps`, flushes: the checkpoint.
  void write_checkpoint(const SamplerState& state);
  // The saved state; stored rows beyond it are dropped from the chain datasets.
  SamplerState read_checkpoint();
  long chain_steps() const;  // the `steps` attribute (sampler steps done)
  long chain_stride() const;  // steps between stored rows (1 in files without the attribute)
  int chain_walkers() const;
  std::size_t chain_dim() const;
  // The chain at step s (1-based), walkers x dim: a stored row, or one of the off-stride
  // diagnostic rows kept for --resume. Throws InputError when the step is not stored.
  std::vector<double> read_chain_row(long step) const;
  // Stored steps first, first + stride, ... <= last (1-based; first and stride multiples of
  // chain_stride(), else InputError): (rows x walkers x dim) flattened, and log-probs
  // (rows x walkers).
  std::vector<double> read_chain_rows(long first, long last, long stride, std::vector<double>* log_prob = nullptr) const;
  // Which stored steps to read for the draws after step `after` up to `last`: every stored
  // step when rows x walkers <= max_samples, else every 2nd, 3rd, ... stored step.
  struct StepSelection {
    long first = 0, last = 0, stride = 1;
    std::size_t rows = 0;  // 0: no stored step in the range
  };
  StepSelection select_steps(long after, long last, std::size_t max_samples) const;

  // ---- Off-stride rows for --resume (ChainWriter uses these).
  // Step held by each slot of /chains/state/diagnostic_rows (-1: free); empty when absent.
  std::vector<long long> diagnostic_slot_steps() const;
  // Writes rows (each walkers x dim values) into slots (growing the dataset as needed),
  // then their step numbers.
  void write_diagnostic_slots(const std::vector<std::size_t>& slots, const std::vector<long long>& steps,
                              const std::vector<const double*>& rows);
  // Deletes the off-stride rows (their space is reused for later chain rows).
  void remove_diagnostic_slots();

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
  std::string path_;
};

// Streams a sampler's chain into a ResultsFile (SamplerObserver::on_step / on_checkpoint
// call these). It keeps in memory the stored-stride rows since the last checkpoint and the
// off-stride rows the sampler's convergence diagnostics may still use (the sampler thins
// its diagnostic rows by powers of two, see diagnostic_steps in sampler.h); at a
// checkpoint it appends the former and writes the latter into diagnostic slots, so that
// `--resume` rebuilds exactly the rows an uninterrupted run would hold. Once the
// diagnostics' thinning is a multiple of the stride every row they use is stored anyway
// and the slots are deleted.
class ChainWriter {
 public:
  // `diagnostic_rows`: SamplerOptions::diagnostic_rows of the run. On a resumed file the
  // slots in use are read back.
  ChainWriter(ResultsFile& file, std::size_t diagnostic_rows);
  void add_step(long step, std::span<const double> positions, std::span<const double> log_prob);
  void checkpoint(const SamplerState& state);

 private:
  ResultsFile& file_;
  std::size_t diagnostic_rows_;
  long stride_;
  long committed_step_ = 0;                       // step of the last checkpoint written
  std::vector<std::vector<double>> positions_, log_prob_;  // stored-stride rows pending
  std::vector<long> off_stride_steps_;            // off-stride rows not yet in slots,
  std::vector<double> off_stride_rows_;           // packed (capacity kept between checkpoints)
  std::vector<long long> slot_step_;              // what each slot holds (-1 free)
  bool slots_removed_ = false;
};

}  // namespace apsides
