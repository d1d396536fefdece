// Progress on stderr for long computations: the one-line bar the command line shows (and
// the Python module, with the same look). Silent when stderr is not a terminal or when
// asked to be quiet, so logs and pipes get no control characters.
#pragma once

#include <chrono>
#include <string>

namespace apsides {

// Whether stderr is a terminal (progress output allowed).
bool stderr_is_terminal();

// "label [#######.....]  42%  12s elapsed, ~16s left  extra", redrawn at most every 0.1 s.
class ProgressBar {
 public:
  ProgressBar(std::string label, double total, bool quiet);
  ~ProgressBar();
  ProgressBar(const ProgressBar&) = delete;
  ProgressBar& operator=(const ProgressBar&) = delete;
  void update(double done, const std::string& extra = "");
  void finish(const std::string& extra = "");
  bool active() const { return active_; }

 private:
  std::string label_;
  double total_;
  bool active_;
  std::chrono::steady_clock::time_point start_, last_;
};

}  // namespace apsides
