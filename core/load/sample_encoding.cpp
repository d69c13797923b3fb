#include "load/sample_encoding.hpp"

#include <array>
#include <bit>
#include <cstring>

namespace salvor::load {

namespace {

struct EncodingRow {
  SampleEncoding encoding;
  std::string_view name;         // sidecar spelling
  std::string_view sigmf;        // SigMF core:datatype
  size_t bytes;
};

constexpr std::array<EncodingRow, 8> kEncodings{{
    {SampleEncoding::int8, "int8", "ri8", 1},
    {SampleEncoding::uint8, "uint8", "ru8", 1},
    {SampleEncoding::int16_le, "int16_le", "ri16_le", 2},
    {SampleEncoding::int16_be, "int16_be", "ri16_be", 2},
    {SampleEncoding::int32_le, "int32_le", "ri32_le", 4},
    {SampleEncoding::int32_be, "int32_be", "ri32_be", 4},
    {SampleEncoding::float32_le, "float32_le", "rf32_le", 4},
    {SampleEncoding::float64_le, "float64_le", "rf64_le", 8},
}};

const EncodingRow& row(SampleEncoding e) {
  for (const auto& r : kEncodings)
    if (r.encoding == e) return r;
  return kEncodings[0];  // unreachable: every enumerator has a row
}

// Assembles an unsigned integer from bytes in the stated order, independent of the host.
template <typename U>
U load_unsigned(const std::byte* p, bool little_endian) {
  U v = 0;
  for (size_t i = 0; i < sizeof(U); ++i) {
    size_t k = little_endian ? sizeof(U) - 1 - i : i;
    v = static_cast<U>((v << 8) | static_cast<U>(std::to_integer<uint8_t>(p[k])));
  }
  return v;
}

}  // namespace

std::string_view encoding_name(SampleEncoding e) { return row(e).name; }

std::optional<SampleEncoding> parse_encoding(std::string_view name) {
  for (const auto& r : kEncodings)
    if (r.name == name) return r.encoding;
  return std::nullopt;
}

std::optional<SampleEncoding> parse_sigmf_datatype(std::string_view datatype) {
  for (const auto& r : kEncodings)
    if (r.sigmf == datatype) return r.encoding;
  return std::nullopt;
}

size_t encoding_bytes(SampleEncoding e) { return row(e).bytes; }

namespace {

template <SampleEncoding E>
inline float decode_one(const std::byte* p) {
  if constexpr (E == SampleEncoding::int8) {
    return static_cast<float>(static_cast<int8_t>(std::to_integer<uint8_t>(p[0]))) / 128.0f;
  } else if constexpr (E == SampleEncoding::uint8) {
    return static_cast<float>(static_cast<int>(std::to_integer<uint8_t>(p[0])) - 128) / 128.0f;
  } else if constexpr (E == SampleEncoding::int16_le || E == SampleEncoding::int16_be) {
    auto u = load_unsigned<uint16_t>(p, E == SampleEncoding::int16_le);
    return static_cast<float>(static_cast<int16_t>(u)) / 32768.0f;
  } else if constexpr (E == SampleEncoding::int32_le || E == SampleEncoding::int32_be) {
    auto u = load_unsigned<uint32_t>(p, E == SampleEncoding::int32_le);
    // Divide in double (exact: a power of two), round once to float, as libsndfile does.
    return static_cast<float>(static_cast<double>(static_cast<int32_t>(u)) / 2147483648.0);
  } else if constexpr (E == SampleEncoding::float32_le) {
    return std::bit_cast<float>(load_unsigned<uint32_t>(p, true));
  } else {
    return static_cast<float>(std::bit_cast<double>(load_unsigned<uint64_t>(p, true)));
  }
}

template <SampleEncoding E>
void decode_loop(const std::byte* p, size_t stride, size_t count, float* out) {
  for (size_t i = 0; i < count; ++i, p += stride) out[i] = decode_one<E>(p);
}

}  // namespace

void decode_strided(SampleEncoding e, const std::byte* first, size_t stride, size_t count, float* out) {
  // One switch per call, not per sample.
  switch (e) {
    case SampleEncoding::int8: return decode_loop<SampleEncoding::int8>(first, stride, count, out);
    case SampleEncoding::uint8: return decode_loop<SampleEncoding::uint8>(first, stride, count, out);
    case SampleEncoding::int16_le: return decode_loop<SampleEncoding::int16_le>(first, stride, count, out);
    case SampleEncoding::int16_be: return decode_loop<SampleEncoding::int16_be>(first, stride, count, out);
    case SampleEncoding::int32_le: return decode_loop<SampleEncoding::int32_le>(first, stride, count, out);
    case SampleEncoding::int32_be: return decode_loop<SampleEncoding::int32_be>(first, stride, count, out);
    case SampleEncoding::float32_le: return decode_loop<SampleEncoding::float32_le>(first, stride, count, out);
    case SampleEncoding::float64_le: return decode_loop<SampleEncoding::float64_le>(first, stride, count, out);
  }
}

float decode_sample(SampleEncoding e, const std::byte* p) {
  float v = 0;
  decode_strided(e, p, 0, 1, &v);
  return v;
}

}  // namespace salvor::load
