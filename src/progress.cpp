#include "apsides/progress.h"

#include <fmt/format.h>
#include <unistd.h>

#include <algorithm>
#include <cstdio>

namespace apsides {

bool stderr_is_terminal() { return isatty(fileno(stderr)) != 0; }

ProgressBar::ProgressBar(std::string label, double total, bool quiet)
    : label_(std::move(label)), total_(total), active_(!quiet && stderr_is_terminal()),
      start_(std::chrono::steady_clock::now()), last_(start_ - std::chrono::seconds(1)) {}

ProgressBar::~ProgressBar() {
  if (active_) std::fputs("\n", stderr);
}

void ProgressBar::update(double done, const std::string& extra) {
  if (!active_) return;
  const auto now = std::chrono::steady_clock::now();
  if (now - last_ < std::chrono::milliseconds(100)) return;
  last_ = now;
  const double frac = total_ > 0 ? std::clamp(done / total_, 0.0, 1.0) : 0.0;
  const int width = 28;
  const int fill = static_cast<int>(frac * width);
  const double elapsed = std::chrono::duration<double>(now - start_).count();
  const double eta = frac > 0 ? elapsed * (1.0 - frac) / frac : 0.0;
  std::string bar(static_cast<std::size_t>(fill), '#');
  bar.resize(width, '.');
  fmt::print(stderr, "\r{} [{}] {:3.0f}%  {:.0f}s elapsed, ~{:.0f}s left  {}\x1b[K", label_, bar,
             100 * frac, elapsed, eta, extra);
  std::fflush(stderr);
}

void ProgressBar::finish(const std::string& extra) {
  if (!active_) return;
  last_ = std::chrono::steady_clock::now() - std::chrono::seconds(1);
  update(total_, extra);
  std::fputs("\n", stderr);
  active_ = false;
}

}  // namespace apsides
