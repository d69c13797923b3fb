#include "common/error.hpp"

namespace salvor {

namespace {
std::string compose(const std::string& where, const std::string& what) {
  return where.empty() ? what : where + ": " + what;
}
}  // namespace

Error::Error(ErrorKind kind, std::string where, const std::string& what)
    : std::runtime_error(compose(where, what)), kind_(kind), where_(std::move(where)) {}

void throw_input(const std::string& where, const std::string& what) {
  throw Error(ErrorKind::input, where, what);
}
void throw_usage(const std::string& where, const std::string& what) {
  throw Error(ErrorKind::usage, where, what);
}
void throw_output(const std::string& where, const std::string& what) {
  throw Error(ErrorKind::output, where, what);
}
void throw_internal(const std::string& what) { throw Error(ErrorKind::internal, "", what); }

int exit_code(ErrorKind kind) {
  switch (kind) {
    case ErrorKind::usage: return exit_usage;
    case ErrorKind::input: return exit_bad_input;
    case ErrorKind::output: return exit_output;
    case ErrorKind::internal: return exit_internal;
  }
  return exit_internal;
}

}  // namespace salvor
