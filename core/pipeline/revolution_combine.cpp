#include "pipeline/revolution_combine.hpp"

#include <fftw3.h>
#include <sndfile.h>

#include <cmath>
#include <complex>
#include <fstream>
#include <mutex>

#include <nlohmann/json.hpp>

#include "common/atomic_file.hpp"
#include "common/error.hpp"
#include "load/capture_reader.hpp"
#include "timing/farrow.hpp"

namespace salvor::pipeline {

namespace fs = std::filesystem;

namespace {

struct Revolution {
  std::vector<float> x;
  double rate = 0;
  double index_sample = 0;  // where the index passes, if the rig recorded it
  bool has_index = false;
};

Revolution read_all(const fs::path& p) {
  load::CaptureReader r = load::open_capture(p);
  Revolution rev;
  rev.rate = r.info().sample_rate_hz;
  const auto& side = r.info().sidecar;
  if (side.is_object() && side.contains("rig") && side["rig"].contains("index_sample")) {
    rev.index_sample = side["rig"]["index_sample"].get<double>();
    rev.has_index = true;
  }
  std::vector<float> buf(1 << 16);
  while (size_t n = r.read(buf)) rev.x.insert(rev.x.end(), buf.begin(), buf.begin() + static_cast<long>(n));
  return rev;
}

// FFTW plan creation is not thread-safe; the retry runs this from one thread at a time,
// but keep it safe regardless.
std::mutex& plan_mutex() {
  static std::mutex m;
  return m;
}

// Lag (in samples, fractional) that best aligns b to a around `guess`, over +-`reach`.
class SegmentCorrelator {
 public:
  explicit SegmentCorrelator(size_t n) : n_(n), a_(n), b_(n), fa_(n / 2 + 1), fb_(n / 2 + 1), c_(n) {
    std::lock_guard<std::mutex> lock(plan_mutex());
    pa_ = fftwf_plan_dft_r2c_1d(static_cast<int>(n), a_.data(), reinterpret_cast<fftwf_complex*>(fa_.data()), FFTW_ESTIMATE);
    pb_ = fftwf_plan_dft_r2c_1d(static_cast<int>(n), b_.data(), reinterpret_cast<fftwf_complex*>(fb_.data()), FFTW_ESTIMATE);
    pc_ = fftwf_plan_dft_c2r_1d(static_cast<int>(n), reinterpret_cast<fftwf_complex*>(fa_.data()), c_.data(), FFTW_ESTIMATE);
  }
  ~SegmentCorrelator() {
    std::lock_guard<std::mutex> lock(plan_mutex());
    fftwf_destroy_plan(pa_);
    fftwf_destroy_plan(pb_);
    fftwf_destroy_plan(pc_);
  }
  SegmentCorrelator(const SegmentCorrelator&) = delete;
  SegmentCorrelator& operator=(const SegmentCorrelator&) = delete;

  // a: reference segment (n/2 samples from `start`), b: the other revolution around
  // start + guess. Returns the lag of b relative to a, or NaN if the peak is weak.
  double lag(const std::vector<float>& ra, const std::vector<float>& rb, long start, long guess, long reach) {
    const long half = static_cast<long>(n_ / 2);
    std::fill(a_.begin(), a_.end(), 0.0f);
    std::fill(b_.begin(), b_.end(), 0.0f);
    for (long i = 0; i < half; ++i) {
      long ia = start + i;
      if (ia >= 0 && ia < static_cast<long>(ra.size())) a_[static_cast<size_t>(i)] = ra[static_cast<size_t>(ia)];
    }
    for (long i = 0; i < half + 2 * reach && i < static_cast<long>(n_); ++i) {
      long ib = start + guess - reach + i;
      if (ib >= 0 && ib < static_cast<long>(rb.size())) b_[static_cast<size_t>(i)] = rb[static_cast<size_t>(ib)];
    }
    fftwf_execute(pa_);
    fftwf_execute(pb_);
    // c[k] = sum_i a[i] b[i + k]: conj(A) * B.
    for (size_t k = 0; k < fa_.size(); ++k) fa_[k] = std::conj(fa_[k]) * fb_[k];
    fftwf_execute(pc_);
    long best = 0;
    float bv = -1e30f;
    for (long k = 0; k <= 2 * reach; ++k)
      if (c_[static_cast<size_t>(k)] > bv) {
        bv = c_[static_cast<size_t>(k)];
        best = k;
      }
    double frac = 0;
    if (best > 0 && best < 2 * reach) {
      double y0 = c_[static_cast<size_t>(best - 1)], y1 = c_[static_cast<size_t>(best)], y2 = c_[static_cast<size_t>(best + 1)];
      double den = y0 - 2 * y1 + y2;
      if (den < 0) frac = 0.5 * (y0 - y2) / den;
    }
    if (!(bv > 0)) return std::nan("");
    return static_cast<double>(guess - reach + best) + frac;
  }

 private:
  size_t n_;
  std::vector<float> a_, b_;
  std::vector<std::complex<float>> fa_, fb_;
  std::vector<float> c_;
  fftwf_plan pa_, pb_, pc_;
};

float sample_at(const std::vector<float>& x, double t) {
  long m = static_cast<long>(std::floor(t));
  double mu = t - static_cast<double>(m);
  std::array<double, 4> v{};
  for (int k = -1; k <= 2; ++k) {
    long i = m + k;
    v[static_cast<size_t>(k + 1)] = (i >= 0 && i < static_cast<long>(x.size())) ? x[static_cast<size_t>(i)] : 0.0;
  }
  return static_cast<float>(timing::farrow_cubic(v, mu));
}

}  // namespace

CombinedCapture combine_revolutions(const std::vector<fs::path>& captures) {
  if (captures.size() < 2) throw_usage("combine", "needs at least two revolutions");
  std::vector<Revolution> revs;
  for (const auto& p : captures) revs.push_back(read_all(p));
  for (size_t r = 1; r < revs.size(); ++r)
    if (revs[r].rate != revs[0].rate)
      throw_input(captures[r].string(), "sample rate differs from the first revolution's; cannot combine");
  CombinedCapture out;
  out.sample_rate_hz = revs[0].rate;
  const auto& ref = revs[0].x;
  std::vector<double> acc(ref.begin(), ref.end());
  const size_t seg = 8192;  // FFT size; segments of seg/2 samples, hop seg/4
  const long hop = static_cast<long>(seg / 4), half = static_cast<long>(seg / 2), reach = 96;
  SegmentCorrelator corr(seg);
  for (size_t r = 1; r < revs.size(); ++r) {
    const auto& x = revs[r].x;
    long guess = revs[r].has_index && revs[0].has_index ? std::lround(revs[r].index_sample - revs[0].index_sample) : 0;
    // Lag per segment centre, each segment searched around the previous lag.
    std::vector<double> centres, lags;
    for (long s = 0; s + half <= static_cast<long>(ref.size()); s += hop) {
      double l = corr.lag(ref, x, s, guess, reach);
      if (std::isnan(l)) continue;
      centres.push_back(static_cast<double>(s + half / 2));
      lags.push_back(l);
      guess = std::lround(l);
    }
    if (lags.empty()) throw_input(captures[r].string(), "no segment of this revolution correlates with the first");
    // Smooth out isolated wrong peaks: median of three.
    std::vector<double> sm = lags;
    for (size_t i = 1; i + 1 < lags.size(); ++i) {
      double a = lags[i - 1], b = lags[i], c = lags[i + 1];
      sm[i] = std::max(std::min(a, b), std::min(std::max(a, b), c));
    }
    double d2 = 0;
    for (size_t i = 1; i < sm.size(); ++i) d2 += (sm[i] - sm[i - 1]) * (sm[i] - sm[i - 1]);
    out.lag_rms.push_back(sm.size() > 1 ? std::sqrt(d2 / static_cast<double>(sm.size() - 1)) : 0.0);
    size_t k = 0;
    for (size_t n = 0; n < ref.size(); ++n) {
      double t = static_cast<double>(n);
      while (k + 1 < centres.size() && centres[k + 1] < t) ++k;
      double lag;
      if (t <= centres.front()) lag = sm.front();
      else if (k + 1 >= centres.size()) lag = sm.back();
      else lag = sm[k] + (sm[k + 1] - sm[k]) * (t - centres[k]) / (centres[k + 1] - centres[k]);
      acc[n] += sample_at(x, t + lag);
    }
  }
  out.samples.resize(ref.size());
  const double inv = 1.0 / static_cast<double>(revs.size());
  for (size_t n = 0; n < ref.size(); ++n) out.samples[n] = static_cast<float>(acc[n] * inv);
  return out;
}

void write_combined_capture(const CombinedCapture& c, const fs::path& first_capture, const std::vector<int>& revolutions,
                            const fs::path& out_wav) {
  fs::create_directories(out_wav.parent_path());
  fs::path tmp = temp_path_for(out_wav);
  SF_INFO info{};
  info.samplerate = static_cast<int>(std::min(c.sample_rate_hz, 2147483647.0));
  info.channels = 1;
  info.format = SF_FORMAT_W64 | SF_FORMAT_FLOAT;
  SNDFILE* f = sf_open(tmp.c_str(), SFM_WRITE, &info);
  if (!f) throw_output(out_wav.string(), std::string("cannot write: ") + sf_strerror(nullptr));
  sf_count_t n = sf_write_float(f, c.samples.data(), static_cast<sf_count_t>(c.samples.size()));
  sf_close(f);
  if (n != static_cast<sf_count_t>(c.samples.size())) throw_output(out_wav.string(), "short write");
  commit_temp_path(tmp, out_wav);
  // Sidecar: the first revolution's, with the combination recorded.
  load::CaptureReader r = load::open_capture(first_capture);
  nlohmann::json side = r.info().sidecar.is_object() ? r.info().sidecar : nlohmann::json::object();
  side["salvor_sidecar"] = 1;
  side["sample_rate_hz"] = c.sample_rate_hz;
  side["revolution"] = revolutions.empty() ? 0 : revolutions.front();  // the time grid it is on
  side["combined_revolutions"] = revolutions;
  side.erase("sample_encoding");
  side["full_scale"] = r.info().full_scale;
  if (r.info().cylinder) side["cylinder"] = *r.info().cylinder;
  if (r.info().head) side["head"] = *r.info().head;
  if (!r.info().format.empty()) side["format"] = r.info().format;
  write_file_atomic(fs::path(out_wav.string() + ".json"), side.dump(1));
}

}  // namespace salvor::pipeline
