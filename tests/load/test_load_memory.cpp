// Streaming keeps memory bounded: peak resident memory (VmHWM, proc(5)) barely moves while
// a 200 MB capture is read, raw or zstd. The peak is reset first through
// /proc/self/clear_refs ("5", Linux 4.0+, proc(5)) so earlier work in the process cannot hide
// growth. Sparse files and zero samples keep the disk and the CPU out of it.

#include <gtest/gtest.h>
#include <unistd.h>
#include <zstd.h>

#include <fstream>

#include "load_test_util.hpp"

using namespace salvor::load;
using namespace salvor::load::test;

namespace {

constexpr uint64_t kBytes = 200ull << 20;       // 200 MiB of int16 = 104,857,600 samples
constexpr long kAllowedGrowthKiB = 16 * 1024;  // the reader's buffers are well under 1 MiB

}  // namespace

TEST(LoadMemory, RawCaptureStreamsInBoundedMemory) {
  ScratchDir dir;
  make_sparse(dir / "big.i16", kBytes);
  auto r = open_capture(dir / "big.i16", rate_option(1e9));
  ASSERT_TRUE(reset_peak_rss()) << "cannot reset VmHWM through /proc/self/clear_refs";
  long before = peak_rss_kib();
  ASSERT_GT(before, 0);
  EXPECT_EQ(drain_zeros(r), kBytes / 2);
  long growth = peak_rss_kib() - before;
  EXPECT_LT(growth, kAllowedGrowthKiB) << "peak RSS grew by " << growth << " KiB while streaming 200 MiB";
}

TEST(LoadMemory, ZstdCaptureStreamsInBoundedMemory) {
  ScratchDir dir;
  {
    // 200 MiB of zeros compressed in 1 MiB pieces (zstd.h streaming API, libzstd 1.5.4).
    std::ofstream out(dir / "big.i16.zst", std::ios::binary);
    ZSTD_CCtx* c = ZSTD_createCCtx();
    ZSTD_CCtx_setParameter(c, ZSTD_c_compressionLevel, 1);
    ZSTD_CCtx_setParameter(c, ZSTD_c_checksumFlag, 1);
    std::vector<char> zeros(1 << 20, 0), ob(ZSTD_CStreamOutSize());
    for (uint64_t done = 0; done < kBytes; done += zeros.size()) {
      bool last = done + zeros.size() >= kBytes;
      ZSTD_inBuffer in{zeros.data(), zeros.size(), 0};
      size_t rem;
      do {
        ZSTD_outBuffer o{ob.data(), ob.size(), 0};
        rem = ZSTD_compressStream2(c, &o, &in, last ? ZSTD_e_end : ZSTD_e_continue);
        ASSERT_FALSE(ZSTD_isError(rem));
        out.write(ob.data(), static_cast<std::streamsize>(o.pos));
      } while (last ? rem != 0 : in.pos < in.size);
    }
    ZSTD_freeCCtx(c);
  }
  auto r = open_capture(dir / "big.i16.zst", rate_option(1e9));
  ASSERT_TRUE(reset_peak_rss());
  long before = peak_rss_kib();
  EXPECT_EQ(drain_zeros(r), kBytes / 2);
  long growth = peak_rss_kib() - before;
  EXPECT_LT(growth, kAllowedGrowthKiB) << "peak RSS grew by " << growth << " KiB while streaming 200 MiB";
}
