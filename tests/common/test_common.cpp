#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>
#include <string>

#include "common/atomic_file.hpp"
#include "common/error.hpp"
#include "common/sha256.hpp"

namespace fs = std::filesystem;

static std::string sha_of(const std::string& s) {
  return salvor::sha256_hex(std::as_bytes(std::span<const char>(s.data(), s.size())));
}

// Check values from FIPS 180-4 / NIST CSRC "SHA-256 example values" (abc, the empty
// string, and the two-block 448-bit message).
TEST(Sha256, NistExampleValues) {
  EXPECT_EQ(sha_of("abc"), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
  EXPECT_EQ(sha_of(""), "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
  EXPECT_EQ(sha_of("abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq"),
            "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1");
}

TEST(Sha256, FileMatchesMemory) {
  fs::path p = fs::temp_directory_path() / "salvor_sha_test.bin";
  std::string data(3 << 20, 'x');
  for (size_t i = 0; i < data.size(); ++i) data[i] = static_cast<char>(i * 131 + 7);
  { std::ofstream(p, std::ios::binary) << data; }
  EXPECT_EQ(salvor::sha256_file_hex(p), sha_of(data));
  fs::remove(p);
  EXPECT_THROW(salvor::sha256_file_hex(p), salvor::Error);
}

TEST(AtomicFile, NothingUnderFinalNameUntilCommit) {
  fs::path dir = fs::temp_directory_path() / "salvor_atomic_test";
  fs::create_directories(dir);
  fs::path final = dir / "out.txt";
  fs::remove(final);
  {
    salvor::AtomicFile f(final);
    f.write("partial");
    EXPECT_FALSE(fs::exists(final));
    EXPECT_TRUE(fs::exists(f.temp_path()));
  }  // destroyed without commit: the temporary is removed, the final name never appears
  EXPECT_FALSE(fs::exists(final));
  EXPECT_TRUE(fs::is_empty(dir));
  {
    salvor::AtomicFile f(final);
    f.write("complete");
    f.commit();
  }
  std::ifstream in(final);
  std::string s;
  in >> s;
  EXPECT_EQ(s, "complete");
  fs::remove_all(dir);
}

TEST(Error, KindsMapToDocumentedExitCodes) {
  EXPECT_EQ(salvor::exit_code(salvor::ErrorKind::usage), 2);
  EXPECT_EQ(salvor::exit_code(salvor::ErrorKind::input), 3);
  EXPECT_EQ(salvor::exit_code(salvor::ErrorKind::output), 5);
  EXPECT_EQ(salvor::exit_code(salvor::ErrorKind::internal), 9);
  try {
    salvor::throw_input("capture.wav", "truncated header");
  } catch (const salvor::Error& e) {
    EXPECT_STREQ(e.what(), "capture.wav: truncated header");
    EXPECT_EQ(e.where(), "capture.wav");
  }
}
