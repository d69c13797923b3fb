#pragma once
// Errors inside the core are exceptions carrying what went wrong and where (file, field,
// value). Outcomes that depend on the data (no sync, CRC failed) are never exceptions:
// they are statuses on a sector. The library never prints and never exits; the commands
// map an ErrorKind to one exit code (see exit_code()).

#include <stdexcept>
#include <string>

namespace salvor {

enum class ErrorKind {
  usage,     // the command line or a parameter is wrong
  input,     // an input file is missing, unreadable, truncated or invalid
  output,    // an output could not be written
  internal,  // a bug: an invariant did not hold
};

class Error : public std::runtime_error {
 public:
  // `where` is a file path or a descriptor field; it is put in front of the message.
  Error(ErrorKind kind, std::string where, const std::string& what);
  ErrorKind kind() const { return kind_; }
  const std::string& where() const { return where_; }

 private:
  ErrorKind kind_;
  std::string where_;
};

[[noreturn]] void throw_input(const std::string& where, const std::string& what);
[[noreturn]] void throw_usage(const std::string& where, const std::string& what);
[[noreturn]] void throw_output(const std::string& where, const std::string& what);
[[noreturn]] void throw_internal(const std::string& what);

// Exit codes of every salvor command. Few, fixed, documented in the README.
enum ExitCode : int {
  exit_ok = 0,           // done; every sector that was asked for is verified
  exit_usage = 2,        // bad command line or parameter
  exit_bad_input = 3,    // an input is missing, unreadable or invalid
  exit_unverified = 4,   // the job finished but some sectors are not verified
  exit_output = 5,       // an output could not be written
  exit_internal = 9,     // internal error (a bug): please report it
};

int exit_code(ErrorKind kind);

}  // namespace salvor
