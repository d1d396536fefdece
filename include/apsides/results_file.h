// The HDF5 results file: one file per run, readable by h5py, astropy or any HDF5 tool.
//
// Layout (every dataset carries "unit" and "description" string attributes):
//   /data/time_bjd, velocity_ms, uncertainty_ms, instrument (index), instrument_names
//        attributes: reference_epoch_bjd
//   /project/text                 the project file as read
//   /parameters/names, units, priors
//   /map/theta                    the start point (MAP fit) in parameter order
//   /chains/positions             (steps x walkers x parameters), chunked, extendible
//   /chains/log_prob              (steps x walkers)
//   /chains/state/positions, log_prob, accepted   the sampler state at the last checkpoint
//        /chains attributes: steps (rows valid), walkers, seed, burn_in_steps,
//        termination, message
//   /derived/<name>               derived-quantity chains over the kept samples
//   /diagnostics/rhat, ess_bulk, ess_tail, tau     per parameter
//   /periodograms, /comparison, /nested_samples    for the other stages (free layout)
//
// Crash safety: between checkpoints nothing is written; at a checkpoint the new chain
// rows are appended, the state is rewritten, `steps` is set, and the file is flushed. A
// `kill -9` at any other moment leaves the file as of the last checkpoint, which h5py
// opens and `apsides sample --resume` continues (rows past `steps`, if any, are dropped).
#pragma once

#include <cstdint>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/sampler.h"

namespace apsides {

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

  // ---- Chains, streamed.
  void create_chains(int walkers, std::size_t dim, std::uint64_t seed, const std::string& options_text);
  // Appends rows (each walkers x dim positions and walkers log-probs) after `steps` rows.
  void append_chain_rows(const std::vector<std::vector<double>>& positions,
                         const std::vector<std::vector<double>>& log_prob);
  // Rewrites the saved state, sets `steps`, flushes: the checkpoint.
  void write_checkpoint(const SamplerState& state);
  // The saved state; rows beyond it are dropped from the chain datasets.
  SamplerState read_checkpoint();
  long chain_steps() const;  // the `steps` attribute (valid rows)
  int chain_walkers() const;
  std::size_t chain_dim() const;
  // One chain row (step s, 1-based), walkers x dim.
  std::vector<double> read_chain_row(long step) const;
  // Rows of steps first..last (1-based, inclusive) taking every `stride`-th:
  // returns (rows x walkers x dim) flattened, and log-probs (rows x walkers).
  std::vector<double> read_chain_rows(long first, long last, long stride, std::vector<double>* log_prob = nullptr) const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
  std::string path_;
};

}  // namespace apsides
