#include "common/atomic_file.hpp"

#include <atomic>
#include <cerrno>
#include <cstring>
#include <fcntl.h>
#include <unistd.h>

#include "common/error.hpp"

namespace salvor {

namespace fs = std::filesystem;

fs::path temp_path_for(const fs::path& final_path) {
  static std::atomic<unsigned> counter{0};
  fs::path t = final_path;
  t += ".tmp-" + std::to_string(::getpid()) + "-" + std::to_string(counter++);
  return t;
}

static void fsync_path(const fs::path& p) {
  int fd = ::open(p.c_str(), O_RDONLY);
  if (fd >= 0) {
    ::fsync(fd);
    ::close(fd);
  }
}

void commit_temp_path(const fs::path& temp, const fs::path& final_path) {
  fsync_path(temp);
  std::error_code ec;
  fs::rename(temp, final_path, ec);
  if (ec) throw_output(final_path.string(), "cannot rename from temporary file: " + ec.message());
  fs::path dir = final_path.parent_path();
  fsync_path(dir.empty() ? fs::path(".") : dir);
}

AtomicFile::AtomicFile(fs::path final_path) : final_(std::move(final_path)) {
  temp_ = temp_path_for(final_);
  file_ = std::fopen(temp_.c_str(), "wb");
  if (!file_) throw_output(final_.string(), std::string("cannot create: ") + std::strerror(errno));
}

AtomicFile::~AtomicFile() {
  if (file_) {
    std::fclose(file_);
    std::error_code ec;
    fs::remove(temp_, ec);
  }
}

void AtomicFile::write(std::span<const std::byte> bytes) {
  if (!file_) throw_internal("AtomicFile::write after commit");
  if (bytes.empty()) return;
  if (std::fwrite(bytes.data(), 1, bytes.size(), file_) != bytes.size())
    throw_output(final_.string(), std::string("write failed: ") + std::strerror(errno));
}

void AtomicFile::write(std::string_view text) {
  write(std::as_bytes(std::span<const char>(text.data(), text.size())));
}

void AtomicFile::commit() {
  if (!file_) throw_internal("AtomicFile::commit twice");
  if (std::fflush(file_) != 0 || ::fsync(::fileno(file_)) != 0) {
    throw_output(final_.string(), std::string("flush failed: ") + std::strerror(errno));
  }
  std::fclose(file_);
  file_ = nullptr;
  commit_temp_path(temp_, final_);
}

void write_file_atomic(const fs::path& path, std::string_view text) {
  AtomicFile f(path);
  f.write(text);
  f.commit();
}

}  // namespace salvor
