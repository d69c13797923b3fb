#include "common/sha256.hpp"

#include <cstdio>
#include <cstring>
#include <cerrno>
#include <openssl/evp.h>
#include <vector>

#include "common/error.hpp"

namespace salvor {

struct Sha256::Impl {
  EVP_MD_CTX* ctx = nullptr;
};

Sha256::Sha256() : impl_(std::make_unique<Impl>()) {
  impl_->ctx = EVP_MD_CTX_new();
  if (!impl_->ctx) throw_internal("EVP_MD_CTX_new failed");
  reset();
}

Sha256::~Sha256() { EVP_MD_CTX_free(impl_->ctx); }

void Sha256::reset() {
  if (EVP_DigestInit_ex(impl_->ctx, EVP_sha256(), nullptr) != 1) throw_internal("SHA-256 init failed");
}

void Sha256::update(std::span<const std::byte> bytes) {
  if (EVP_DigestUpdate(impl_->ctx, bytes.data(), bytes.size()) != 1) throw_internal("SHA-256 update failed");
}

std::string Sha256::hex_digest() {
  unsigned char md[EVP_MAX_MD_SIZE];
  unsigned int len = 0;
  if (EVP_DigestFinal_ex(impl_->ctx, md, &len) != 1) throw_internal("SHA-256 final failed");
  static const char* hex = "0123456789abcdef";
  std::string out;
  out.reserve(2 * len);
  for (unsigned i = 0; i < len; ++i) {
    out.push_back(hex[md[i] >> 4]);
    out.push_back(hex[md[i] & 15]);
  }
  return out;
}

std::string sha256_hex(std::span<const std::byte> bytes) {
  Sha256 h;
  h.update(bytes);
  return h.hex_digest();
}

std::string sha256_file_hex(const std::filesystem::path& path) {
  std::FILE* f = std::fopen(path.c_str(), "rb");
  if (!f) throw_input(path.string(), std::string("cannot open for hashing: ") + std::strerror(errno));
  Sha256 h;
  std::vector<std::byte> buf(1 << 20);
  size_t n;
  while ((n = std::fread(buf.data(), 1, buf.size(), f)) > 0) h.update(std::span(buf.data(), n));
  bool bad = std::ferror(f);
  std::fclose(f);
  if (bad) throw_input(path.string(), "read error while hashing");
  return h.hex_digest();
}

}  // namespace salvor
