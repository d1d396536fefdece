// apsides: the one exception type for bad user input.
//
// Every malformed input (files, project TOML, command-line options) throws InputError
// with a message that names the source (file:line, or the TOML key), the value and the
// rule, e.g. `velocities.csv:17: uncertainty is -0.4; it must be > 0`. The command line
// prints that one line and exits with code 2. Numerical outcomes (no convergence, ...)
// are never exceptions: they go into each stage's summary (`termination`, `message`).
#pragma once

#include <stdexcept>
#include <string>

namespace apsides {

class InputError : public std::runtime_error {
 public:
  explicit InputError(const std::string& message) : std::runtime_error(message) {}
};

}  // namespace apsides
