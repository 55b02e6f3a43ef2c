// Tests of the optional perceptual smoothing stage: brief dips go, lasting changes and gaps stay, bridging
// only when asked and always marked.
#include "pitchwire/dsp/contour_smoother.h"
#include "pitchwire/dsp/units.h"

#include <gtest/gtest.h>

#include <cmath>
#include <vector>

namespace pitchwire::dsp {
namespace {

// Runs a contour (Hz per 5 ms frame, 0 = unvoiced) through the smoother and returns its output.
std::vector<SmoothedFrame> smooth(const std::vector<float>& hz, SmootherConfig cfg = {}) {
  ContourSmoother s(cfg);
  std::vector<SmoothedFrame> out;
  for (std::size_t i = 0; i < hz.size(); ++i) {
    SettledFrame f;
    f.index = static_cast<std::int64_t>(i);
    f.time_s = 0.005 * static_cast<double>(i);
    if (hz[i] > 0) f.f0_hz = hz[i];
    SmoothedFrame o;
    if (s.push(f, &o) == 1) out.push_back(o);
  }
  s.flush(out);
  return out;
}

TEST(ContourSmoother, BriefDipIsRemovedAndEveryFrameComesOutInOrder) {
  // 200 Hz with a 20 ms dip of 1.5 semitones (the size of a consonant-driven dip; common practice).
  std::vector<float> hz(100, 200.0f);
  for (int i = 50; i < 54; ++i) hz[static_cast<std::size_t>(i)] = static_cast<float>(hz_from_semitones(-1.5, 200));
  const auto out = smooth(hz);
  ASSERT_EQ(out.size(), hz.size());
  for (std::size_t i = 0; i < out.size(); ++i) {
    EXPECT_EQ(out[i].index, static_cast<std::int64_t>(i));
    ASSERT_TRUE(out[i].f0_hz);
    EXPECT_NEAR(*out[i].f0_hz, 200.0, 0.01) << i;
    EXPECT_FALSE(out[i].bridged);
  }
}

TEST(ContourSmoother, LastingChangeIsKept) {
  // A 150 ms step of 3 semitones is melody, not microprosody.
  std::vector<float> hz(100, 200.0f);
  const auto up = static_cast<float>(hz_from_semitones(3, 200));
  for (int i = 40; i < 70; ++i) hz[static_cast<std::size_t>(i)] = up;
  const auto out = smooth(hz);
  for (int i = 45; i < 65; ++i) EXPECT_NEAR(*out[static_cast<std::size_t>(i)].f0_hz, up, 0.01) << i;
}

TEST(ContourSmoother, GapsStayGapsUnlessBridgingIsAsked) {
  std::vector<float> hz(60, 0.0f);
  for (int i = 0; i < 20; ++i) hz[static_cast<std::size_t>(i)] = 200.0f;
  for (int i = 28; i < 60; ++i) hz[static_cast<std::size_t>(i)] = static_cast<float>(hz_from_semitones(2, 200));
  const auto plain = smooth(hz);
  for (int i = 20; i < 28; ++i) EXPECT_FALSE(plain[static_cast<std::size_t>(i)].f0_hz) << i;

  SmootherConfig cfg;
  cfg.bridge_max_ms = 50;  // the gap is 8 frames = 40 ms
  const auto bridged = smooth(hz, cfg);
  for (int i = 20; i < 28; ++i) {
    const auto& f = bridged[static_cast<std::size_t>(i)];
    ASSERT_TRUE(f.f0_hz) << i;
    EXPECT_TRUE(f.bridged);
    // Straight line in semitones from 0 st (frame 19) to 2 st (frame 28).
    EXPECT_NEAR(semitones(*f.f0_hz, 200), 2.0 * (i - 19) / 9.0, 1e-3) << i;
  }
  EXPECT_FALSE(bridged[19].bridged);

  cfg.bridge_max_ms = 35;  // shorter than the gap: left alone
  const auto too_long = smooth(hz, cfg);
  for (int i = 20; i < 28; ++i) EXPECT_FALSE(too_long[static_cast<std::size_t>(i)].f0_hz) << i;
}

TEST(ContourSmoother, MedianNeverReachesAcrossAGap) {
  // A short voiced island next to a gap keeps its own value.
  std::vector<float> hz(40, 0.0f);
  for (int i = 10; i < 14; ++i) hz[static_cast<std::size_t>(i)] = 300.0f;
  for (int i = 16; i < 40; ++i) hz[static_cast<std::size_t>(i)] = 150.0f;
  const auto out = smooth(hz);
  for (int i = 10; i < 14; ++i) EXPECT_NEAR(*out[static_cast<std::size_t>(i)].f0_hz, 300.0, 0.01);
}

TEST(SmootherConfig, BadValuesNameTheField) {
  SmootherConfig c;
  c.median_ms = -5;
  EXPECT_NE(c.validate().find("median_ms"), std::string::npos);
  EXPECT_THROW(ContourSmoother{c}, std::invalid_argument);
  c = {};
  c.bridge_max_ms = 1e9;
  EXPECT_NE(c.validate().find("bridge_max_ms"), std::string::npos);
}

}  // namespace
}  // namespace pitchwire::dsp
