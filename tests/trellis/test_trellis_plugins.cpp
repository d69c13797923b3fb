// The four trellis plugins through the C interface (core/detect/salvor_detector.h):
// loaded with dlopen from the build's plugin folder, never linked.
#include <dlfcn.h>
#include <gtest/gtest.h>

#include <cmath>
#include <cstring>
#include <random>
#include <set>
#include <string>
#include <vector>

#include "channel_sim.hpp"
#include "detect/salvor_detector.h"
#include "plugin_instance.hpp"

using namespace trellis_test;
using trellis_test::Instance;
using trellis_test::Plugin;

namespace {

const std::vector<double> kEPR4 = {1, 1, -1, -1};

struct Data {
  Bits a;
  std::vector<float> y;
  std::vector<uint8_t> erasure;
};

Data make_data(size_t n, double sigma, uint64_t seed, const std::vector<double>& f = kEPR4) {
  std::mt19937_64 rng(seed);
  Data d;
  d.a = random_bits(n, rng);
  d.y = add_noise(pr_channel(levels_from_nrzi(d.a), f), sigma, rng);
  d.erasure.assign(n, 0);
  for (size_t k = 1000; k < 1012 && k < n; ++k) d.erasure[k] = 1;  // a flagged burst
  return d;
}

class TrellisPlugin : public ::testing::TestWithParam<std::string> {};

}  // namespace

TEST_P(TrellisPlugin, TableIsComplete) {
  Plugin p(GetParam());
  ASSERT_NE(p.lib, nullptr) << dlerror();
  ASSERT_NE(p.api, nullptr);
  const salvor_detector_api* a = p.api;
  EXPECT_EQ(a->abi_version, SALVOR_DETECTOR_ABI_VERSION);
  EXPECT_EQ(a->struct_size, sizeof(salvor_detector_api));
  EXPECT_EQ(std::string(a->name), GetParam());
  EXPECT_GT(std::strlen(a->version), 0u);
  EXPECT_GT(std::strlen(a->description), 10u);
  const std::set<std::string> targets = {"PR4", "EPR4", "E2PR4", "GPR", "none"};
  EXPECT_TRUE(targets.count(a->target)) << a->target;
  EXPECT_EQ(a->soft_output, GetParam() == "maxlogmap" ? 1 : 0);
  EXPECT_GE(a->max_latency, 64u);
  ASSERT_TRUE(a->create && a->process && a->flush && a->reset && a->destroy);
  const bool trains = GetParam() == "npml" || GetParam() == "pdnp";
  EXPECT_EQ(a->train != nullptr, trains);
  std::set<std::string> keys;
  for (size_t i = 0; i < a->param_count; ++i) {
    const salvor_param_desc& d = a->params[i];
    ASSERT_NE(d.key, nullptr);
    EXPECT_TRUE(keys.insert(d.key).second) << "duplicate key " << d.key;
    EXPECT_TRUE(d.type == SALVOR_PARAM_INT || d.type == SALVOR_PARAM_BOOL) << d.key;
    EXPECT_LE(d.min_value, d.default_value) << d.key;
    EXPECT_GE(d.max_value, d.default_value) << d.key;
    ASSERT_NE(d.units, nullptr);
    ASSERT_NE(d.help, nullptr);
    EXPECT_GT(std::strlen(d.help), 10u) << d.key;
  }
  // Only the entry point is exported (hidden symbols, references: salvor.cmake).
  EXPECT_EQ(dlsym(p.lib, "_ZN6salvor11throw_usageERKNSt7__cxx1112basic_stringIcSt11char_traitsIcESaIcEEES7_"), nullptr);
}

TEST_P(TrellisPlugin, RefusesOutOfRangeParametersAtCreate) {
  Plugin p(GetParam());
  ASSERT_NE(p.api, nullptr);
  const salvor_detector_api* a = p.api;
  {
    Instance ok(a, {});
    EXPECT_EQ(ok.status, SALVOR_OK) << ok.err;
    EXPECT_NE(ok.h, nullptr);
  }
  for (size_t i = 0; i < a->param_count; ++i) {
    const salvor_param_desc& d = a->params[i];
    std::vector<double> bad = {d.max_value + 1, d.min_value - 1, NAN};
    if (d.type == SALVOR_PARAM_INT) bad.push_back(d.default_value + 0.5);
    if (d.type == SALVOR_PARAM_BOOL) bad.push_back(0.5);
    for (double v : bad) {
      Instance inst(a, {{d.key, v}});
      EXPECT_EQ(inst.status, SALVOR_E_PARAM) << d.key << " = " << v;
      EXPECT_EQ(inst.h, nullptr);
      EXPECT_NE(std::string(inst.err).find(d.key), std::string::npos) << inst.err;
    }
  }
  Instance unknown(a, {{"no_such_knob", 1}});
  EXPECT_EQ(unknown.status, SALVOR_E_PARAM);
  EXPECT_NE(std::string(unknown.err).find("unknown parameter 'no_such_knob'"), std::string::npos)
      << unknown.err;
  Instance no_target(a, {}, {});
  EXPECT_EQ(no_target.status, SALVOR_E_PARAM);
  EXPECT_NE(std::string(no_target.err).find("target"), std::string::npos);
  Instance long_target(a, {}, std::vector<double>(7, 0.5));
  EXPECT_EQ(long_target.status, SALVOR_E_PARAM);
  Instance nan_tap(a, {}, {1.0, NAN});
  EXPECT_EQ(nan_tap.status, SALVOR_E_PARAM);
  Instance nan_sigma(a, {}, kEPR4, NAN);
  EXPECT_EQ(nan_sigma.status, SALVOR_E_PARAM);
  // A configuration struct from an older, smaller layout.
  salvor_detector_config c{};
  c.struct_size = 8;
  c.target = kEPR4.data();
  c.target_len = 4;
  void* h = reinterpret_cast<void*>(1);
  char err[128];
  EXPECT_EQ(a->create(&c, &h, err, sizeof err), SALVOR_E_PARAM);
  EXPECT_EQ(h, nullptr);
  EXPECT_NE(std::string(err).find("struct_size"), std::string::npos) << err;
  // Messages are truncated to the buffer, NUL-terminated.
  c.struct_size = sizeof c;
  c.target = nullptr;
  c.target_len = 0;
  char tiny[6];
  std::memset(tiny, 'x', sizeof tiny);
  EXPECT_EQ(a->create(&c, &h, tiny, sizeof tiny), SALVOR_E_PARAM);
  EXPECT_EQ(std::strlen(tiny), 5u);
}

TEST_P(TrellisPlugin, ProcessRefusesTooSmallOutputAndNullInput) {
  Plugin p(GetParam());
  ASSERT_NE(p.api, nullptr);
  Instance inst(p.api, {});
  ASSERT_EQ(inst.status, SALVOR_OK);
  std::vector<float> y(100, 0.5f);
  std::vector<uint8_t> b(50);
  std::vector<float> l(50);
  salvor_detector_input in{y.data(), nullptr, y.size()};
  salvor_detector_output out{b.data(), l.data(), b.size(), 0};
  EXPECT_EQ(p.api->process(inst.h, &in, &out, inst.err, sizeof inst.err), SALVOR_E_INPUT);
  EXPECT_NE(std::string(inst.err).find("capacity"), std::string::npos) << inst.err;
  EXPECT_EQ(out.produced, 0u);
  salvor_detector_input null_in{nullptr, nullptr, 10};
  EXPECT_EQ(p.api->process(inst.h, &null_in, &out, inst.err, sizeof inst.err), SALVOR_E_INPUT);
  y[3] = NAN;
  b.resize(100 + p.api->max_latency);
  l.resize(b.size());
  salvor_detector_output big{b.data(), l.data(), b.size(), 0};
  EXPECT_EQ(p.api->process(inst.h, &in, &big, inst.err, sizeof inst.err), SALVOR_E_INPUT);
  EXPECT_NE(std::string(inst.err).find("sample 3"), std::string::npos) << inst.err;
}

namespace {
// Creates an instance in a state worth testing: the noise-predictive ones trained (or
// adapting from decisions when `adapt`).
std::unique_ptr<Instance> prepared(const salvor_detector_api* a, bool adapt, double sigma) {
  std::vector<salvor_param_value> params;
  if (adapt) params.push_back({"adapt", 1});
  if (std::string(a->name) == "maxlogmap") params = {{"block_length", 100}, {"overlap", 30}};
  if (std::string(a->name) == "viterbi") params = {{"traceback_depth", 40}, {"reliability_window", 20}};
  auto inst = std::make_unique<Instance>(a, params, kEPR4, sigma);
  if (inst->status != SALVOR_OK) return inst;
  if (a->train && !adapt) {
    Data t = make_data(3000, 0.4, 99);
    inst->status = a->train(inst->h, t.y.data(), t.a.data(), t.y.size(), -1, inst->err, sizeof inst->err);
  }
  return inst;
}
}  // namespace

TEST_P(TrellisPlugin, ChunkingDoesNotChangeBitsOrLlrs) {
  Plugin p(GetParam());
  ASSERT_NE(p.api, nullptr);
  const Data d = make_data(6000, 0.45, 5);
  const bool trains = p.api->train != nullptr;
  for (bool adapt : trains ? std::vector<bool>{false, true} : std::vector<bool>{false}) {
    for (double sigma : {0.45, 0.0}) {
      std::vector<uint8_t> ref_bits;
      std::vector<float> ref_llr;
      {
        auto inst = prepared(p.api, adapt, sigma);
        ASSERT_EQ(inst->status, SALVOR_OK) << inst->err;
        inst->run(d.y, d.erasure, d.y.size(), &ref_bits, &ref_llr);
      }
      ASSERT_EQ(ref_bits.size(), d.y.size());
      // The detector works: few errors at this noise level.
      EXPECT_LT(count_errors(d.a, ref_bits, 8, 0).rate(), 0.02);
      for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}}) {
        auto inst = prepared(p.api, adapt, sigma);
        std::vector<uint8_t> bits;
        std::vector<float> llr;
        inst->run(d.y, d.erasure, chunk, &bits, &llr);
        EXPECT_EQ(bits, ref_bits) << "chunk " << chunk << " adapt " << adapt;
        EXPECT_EQ(llr, ref_llr) << "chunk " << chunk << " adapt " << adapt;
      }
      // Signs agree with the bits.
      for (size_t k = 0; k < ref_bits.size(); ++k)
        if (ref_llr[k] != 0.0f) {
          ASSERT_EQ(ref_llr[k] > 0, ref_bits[k] == 1) << k;
        }
    }
  }
}

TEST_P(TrellisPlugin, ResetThenSameInputGivesSameOutput) {
  Plugin p(GetParam());
  ASSERT_NE(p.api, nullptr);
  const bool trains = p.api->train != nullptr;
  const Data d1 = make_data(3000, 0.45, 6), d2 = make_data(3000, 0.5, 7);
  for (bool adapt : trains ? std::vector<bool>{false, true} : std::vector<bool>{false}) {
    auto inst = prepared(p.api, adapt, 0.0);
    ASSERT_EQ(inst->status, SALVOR_OK);
    std::vector<uint8_t> b1, b2, b3;
    std::vector<float> l1, l2, l3;
    inst->run(d1.y, d1.erasure, 500, &b1, &l1);
    inst->run(d2.y, d2.erasure, 500, &b2, &l2);  // state and estimates move on
    p.api->reset(inst->h);
    inst->run(d1.y, d1.erasure, 333, &b3, &l3);
    EXPECT_EQ(b1, b3);
    EXPECT_EQ(l1, l3);
  }
}

TEST_P(TrellisPlugin, TrainRefusesBadLevels) {
  Plugin p(GetParam());
  ASSERT_NE(p.api, nullptr);
  if (!p.api->train) GTEST_SKIP() << "no train()";
  Instance inst(p.api, {});
  ASSERT_EQ(inst.status, SALVOR_OK);
  Data t = make_data(500, 0.4, 8);
  EXPECT_EQ(p.api->train(inst.h, t.y.data(), t.a.data(), t.y.size(), 0, inst.err, sizeof inst.err),
            SALVOR_E_PARAM);
  EXPECT_NE(std::string(inst.err).find("+1 or -1"), std::string::npos) << inst.err;
  t.a[3] = 2;
  EXPECT_EQ(p.api->train(inst.h, t.y.data(), t.a.data(), t.y.size(), 1, inst.err, sizeof inst.err),
            SALVOR_E_INPUT);
  EXPECT_EQ(p.api->train(inst.h, nullptr, t.a.data(), 10, 1, inst.err, sizeof inst.err),
            SALVOR_E_INPUT);
}

INSTANTIATE_TEST_SUITE_P(Trellis, TrellisPlugin,
                         ::testing::Values("viterbi", "npml", "pdnp", "maxlogmap"),
                         [](const auto& info) { return info.param; });
