// Long streaming runs, labelled slow: a whole capture above 4 GiB read to the end.

#include <gtest/gtest.h>

#include "load_test_util.hpp"

using namespace salvor::load;
using namespace salvor::load::test;

// Whole-file read of a capture above 4 GiB (sparse): 64-bit positions all the way. Slow.
TEST(LoadMemorySlow, RawAboveFourGibibytesReadsToTheEnd) {
  ScratchDir dir;
  const uint64_t bytes = (9ull << 29) + 10;  // 4.5 GiB + 5 samples
  make_sparse(dir / "huge.i16", bytes);
  auto r = open_capture(dir / "huge.i16", rate_option(1e9));
  ASSERT_TRUE(reset_peak_rss());
  long before = peak_rss_kib();
  EXPECT_EQ(drain_zeros(r), bytes / 2);
  EXPECT_EQ(r.position(), bytes / 2);
  EXPECT_LT(peak_rss_kib() - before, 16 * 1024);  // KiB: the buffers are well under 1 MiB
}
