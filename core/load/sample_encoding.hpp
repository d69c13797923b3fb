#pragma once
// Sample encodings of headerless captures (raw, zstd-compressed raw, SigMF data files) and
// their conversion to float. The scale matches what libsndfile's sf_read_float returns for
// the same integer width (libsndfile 1.2.0, normalisation on, the default), so one capture
// stored as WAV and as raw reads back to the same floats:
//
//   encoding     bytes  float value of a stored sample v    range after loading
//   int8           1    v / 128                              [-1, 127/128]
//   uint8          1    (v - 128) / 128                      [-1, 127/128]
//   int16_le/be    2    v / 32768                            [-1, 32767/32768]
//   int32_le/be    4    v / 2147483648 (rounded to float)    [-1, 1)
//   float32_le     4    v                                    as stored
//   float64_le     8    v rounded to float                   as stored
//
// The divisors are powers of two, so integer samples of up to 24 bits convert exactly.

#include <cstddef>
#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <string_view>

namespace salvor::load {

enum class SampleEncoding { int8, uint8, int16_le, int16_be, int32_le, int32_be, float32_le, float64_le };

// The sidecar spelling ("int16_le", ...).
std::string_view encoding_name(SampleEncoding e);
// Parses the sidecar spelling; nullopt for anything else.
std::optional<SampleEncoding> parse_encoding(std::string_view name);
// Parses a SigMF real datatype ("ri16_le", ...); nullopt for anything else.
std::optional<SampleEncoding> parse_sigmf_datatype(std::string_view datatype);
size_t encoding_bytes(SampleEncoding e);

// Converts one stored sample starting at `bytes` (at least encoding_bytes(e) long).
float decode_sample(SampleEncoding e, const std::byte* bytes);
// Converts `count` samples, the first at `first`, each `stride` bytes after the previous
// (stride = frame size: one channel out of interleaved frames).
void decode_strided(SampleEncoding e, const std::byte* first, size_t stride, size_t count, float* out);

}  // namespace salvor::load
