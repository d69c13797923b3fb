#pragma once
#include <string>

namespace salvor {

// "0.1.0+g<hash>": the project version from CMake with the git hash of the build.
const std::string& version_string();

}  // namespace salvor
