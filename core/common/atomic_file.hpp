#pragma once
// Outputs are never left half-written under their final name: write to a temporary name
// in the same folder, flush and fsync, then rename over the final name.

#include <cstddef>
#include <cstdio>
#include <filesystem>
#include <span>
#include <string>
#include <string_view>

namespace salvor {

class AtomicFile {
 public:
  // Opens "<final>.tmp-<pid>-<n>" for writing beside `final_path`.
  explicit AtomicFile(std::filesystem::path final_path);
  ~AtomicFile();  // an uncommitted file is removed
  AtomicFile(const AtomicFile&) = delete;
  AtomicFile& operator=(const AtomicFile&) = delete;

  void write(std::span<const std::byte> bytes);
  void write(std::string_view text);
  // Flush, fsync, close and rename onto the final name. After commit() the object is inert.
  void commit();

  const std::filesystem::path& temp_path() const { return temp_; }
  const std::filesystem::path& final_path() const { return final_; }
  std::FILE* handle() { return file_; }  // for libraries that want a FILE*

 private:
  std::filesystem::path final_;
  std::filesystem::path temp_;
  std::FILE* file_ = nullptr;
};

// Convenience: write a whole text or binary file atomically.
void write_file_atomic(const std::filesystem::path& path, std::string_view text);

// A temporary name beside `final_path` for writers that need a path (libsndfile, ...).
// The caller renames it with commit_temp_path() when the file is complete.
std::filesystem::path temp_path_for(const std::filesystem::path& final_path);
void commit_temp_path(const std::filesystem::path& temp, const std::filesystem::path& final_path);

}  // namespace salvor
