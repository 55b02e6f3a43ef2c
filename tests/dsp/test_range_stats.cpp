// Range statistics against values known by construction and against the percentile definition.
#include "pitchwire/dsp/range_stats.h"
#include "pitchwire/dsp/units.h"

#include <gtest/gtest.h>

#include <cmath>
#include <vector>

namespace pitchwire::dsp {
namespace {

TEST(RangeStats, PercentilesFollowHyndmanAndFanDefinition7) {
  // Definition 7 (R's and NumPy's default): quantile(1:4, 0.5) = 2.5; quantile(1:10, 0.05) = 1.45;
  // quantile(1:10, 0.95) = 9.55 (worked by hand from h = (n - 1) p).
  const std::vector<double> four = {1, 2, 3, 4};
  EXPECT_DOUBLE_EQ(percentile_sorted(four, 0.5), 2.5);
  std::vector<double> ten;
  for (int i = 1; i <= 10; ++i) ten.push_back(i);
  EXPECT_NEAR(percentile_sorted(ten, 0.05), 1.45, 1e-12);
  EXPECT_NEAR(percentile_sorted(ten, 0.95), 9.55, 1e-12);
  EXPECT_DOUBLE_EQ(percentile_sorted(ten, 0.0), 1.0);
  EXPECT_DOUBLE_EQ(percentile_sorted(ten, 1.0), 10.0);
}

TEST(RangeStats, GlideBetweenTwoKnownNotesHasAKnownRange) {
  // An exponential glide from A3 (220 Hz) to A4 (440 Hz) sampled evenly in time is uniform in semitones
  // over [0, 12]: median 6 st above A3 (311.13 Hz), p5 at 0.6 st, p95 at 11.4 st, width 10.8 st.
  std::vector<double> f0;
  const int n = 100001;
  for (int i = 0; i < n; ++i) f0.push_back(220.0 * std::exp2(static_cast<double>(i) / (n - 1)));
  const auto r = f0_range(f0);
  ASSERT_TRUE(r);
  EXPECT_NEAR(r->min_hz, 220.0, 1e-9);
  EXPECT_NEAR(r->max_hz, 440.0, 1e-9);
  EXPECT_NEAR(semitones(r->median_hz, 220.0), 6.0, 1e-3);
  EXPECT_NEAR(semitones(r->p5_hz, 220.0), 0.6, 1e-3);
  EXPECT_NEAR(semitones(r->p95_hz, 220.0), 11.4, 1e-3);
  EXPECT_NEAR(r->p5_p95_semitones, 10.8, 1e-3);
}

TEST(RangeStats, NoVoicedFramesNoRange) {
  std::vector<double> none;
  EXPECT_FALSE(f0_range(none));
}

}  // namespace
}  // namespace pitchwire::dsp

// A sine vibrato of depth +-d semitones sampled evenly over whole cycles has a population SD of d/sqrt(2)
// (the RMS of a sine is its amplitude / sqrt(2), common practice). 5.5 Hz vibrato of +-0.5 st around A3.
TEST(RangeStats, SineVibratoOfKnownDepthHasAKnownSd) {
  constexpr double kDepthSt = 0.5;
  constexpr double kRateHz = 5.5;
  constexpr double kHopS = 0.005;
  std::vector<double> f0;
  const int n = static_cast<int>(std::lround(4.0 / kRateHz / kHopS));  // 4 whole cycles: 800/1.1 hops
  for (int i = 0; i < n; ++i) {
    const double t = i * (4.0 / kRateHz) / n;  // evenly spaced over exactly 4 cycles
    f0.push_back(pitchwire::dsp::hz_from_semitones(kDepthSt * std::sin(2.0 * M_PI * kRateHz * t), 220.0));
  }
  const auto sd = pitchwire::dsp::f0_sd_semitones(f0);
  ASSERT_TRUE(sd.has_value());
  EXPECT_NEAR(*sd, kDepthSt / std::sqrt(2.0), 1e-9);
}

TEST(RangeStats, SdOfASteadyToneIsZeroAndNeedsTwoValues) {
  const std::vector<double> steady(100, 196.0);
  EXPECT_NEAR(pitchwire::dsp::f0_sd_semitones(steady).value(), 0.0, 1e-12);
  const std::vector<double> one{196.0};
  EXPECT_FALSE(pitchwire::dsp::f0_sd_semitones(one).has_value());
}
