// Read-only input files and the checks every capture and sidecar goes through first.

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>

#include "common/error.hpp"
#include "load/load_detail.hpp"

namespace salvor::load::detail {

InputFile::InputFile(const std::filesystem::path& path, bool allow_empty) : name_(path.string()) {
  struct stat st {};
  if (::stat(name_.c_str(), &st) != 0) {
    if (errno == ENOENT || errno == ENOTDIR) throw_input(name_, "file does not exist");
    throw_input(name_, std::string("cannot examine file: ") + std::strerror(errno));
  }
  if (S_ISDIR(st.st_mode)) throw_input(name_, "is a directory, not a capture file");
  if (!S_ISREG(st.st_mode)) throw_input(name_, "is not a regular file");
  fd_ = ::open(name_.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd_ < 0) throw_input(name_, std::string("cannot open for reading: ") + std::strerror(errno));
  // Size from the open descriptor, so a file replaced after stat() cannot mislead us.
  if (::fstat(fd_, &st) != 0) {
    int e = errno;
    ::close(fd_);
    throw_input(name_, std::string("cannot examine file: ") + std::strerror(e));
  }
  size_ = static_cast<uint64_t>(st.st_size);
  if (size_ == 0 && !allow_empty) {
    ::close(fd_);
    fd_ = -1;
    throw_input(name_, "file is empty");
  }
}

InputFile::~InputFile() {
  if (fd_ >= 0) ::close(fd_);
}

int InputFile::release() {
  int fd = fd_;
  fd_ = -1;
  return fd;
}

size_t InputFile::read_at(uint64_t offset, std::span<std::byte> out) const {
  size_t done = 0;
  while (done < out.size()) {
    ssize_t n = ::pread(fd_, out.data() + done, out.size() - done, static_cast<off_t>(offset + done));
    if (n < 0) {
      if (errno == EINTR) continue;
      throw_input(name_, std::string("read failed at byte ") + std::to_string(offset + done) + ": " +
                             std::strerror(errno));
    }
    if (n == 0) break;
    done += static_cast<size_t>(n);
  }
  return done;
}

std::vector<std::byte> read_prefix(const InputFile& file, size_t n) {
  std::vector<std::byte> bytes(n);
  bytes.resize(file.read_at(0, bytes));
  return bytes;
}

std::string read_small_file(const InputFile& file, size_t limit) {
  if (file.size() > limit)
    throw_input(file.name(), "metadata file is " + std::to_string(file.size()) +
                                 " bytes, more than the " + std::to_string(limit) + " accepted");
  std::string text(file.size(), '\0');
  size_t n = file.read_at(0, std::as_writable_bytes(std::span<char>(text.data(), text.size())));
  text.resize(n);
  return text;
}

std::string format_hz(double hz) {
  if (std::isnan(hz)) return "NaN Hz";
  if (std::isinf(hz)) return hz > 0 ? "infinite Hz" : "-infinite Hz";
  struct Unit {
    double scale;
    const char* name;
  };
  static constexpr Unit units[] = {{1e12, "THz"}, {1e9, "GHz"}, {1e6, "MHz"}, {1e3, "kHz"}};
  char buf[64];
  for (const auto& u : units) {
    if (std::fabs(hz) >= u.scale) {
      std::snprintf(buf, sizeof buf, "%.10g %s", hz / u.scale, u.name);
      return buf;
    }
  }
  std::snprintf(buf, sizeof buf, "%.10g Hz", hz);
  return buf;
}

}  // namespace salvor::load::detail
