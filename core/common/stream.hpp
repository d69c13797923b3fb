#pragma once
// The streaming contract shared by every stage: process() consumes some input, produces
// some output, and says how far it got. A stage never needs the whole capture.

#include <cstddef>

namespace salvor {

struct Progress {
  size_t consumed = 0;  // input items used
  size_t produced = 0;  // output items written
};

}  // namespace salvor
