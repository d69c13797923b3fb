#pragma once
// SHA-256 of inputs and outputs for provenance (run.json). Streaming, so a multi-GiB
// capture is hashed in bounded memory. Backed by OpenSSL's libcrypto.

#include <cstddef>
#include <filesystem>
#include <memory>
#include <span>
#include <string>

namespace salvor {

class Sha256 {
 public:
  Sha256();
  ~Sha256();
  Sha256(const Sha256&) = delete;
  Sha256& operator=(const Sha256&) = delete;
  void update(std::span<const std::byte> bytes);
  std::string hex_digest();  // lowercase hex; finishes the hash
  void reset();

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

std::string sha256_hex(std::span<const std::byte> bytes);
std::string sha256_file_hex(const std::filesystem::path& path);  // throws input error

}  // namespace salvor
