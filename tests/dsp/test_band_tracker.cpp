// Tests of the band state with hysteresis in time (dsp/band_tracker.h), on F0 series known by
// construction.
#include "pitchwire/dsp/band_tracker.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>
#include <optional>
#include <vector>

namespace pitchwire::dsp {
namespace {

constexpr double kHop = 0.005;

TEST(BandPosition, LimitsAreInsideAndNoF0IsUnvoiced) {
  EXPECT_EQ(band_position(165.0f, 165.0, 220.0), BandPosition::inside);
  EXPECT_EQ(band_position(220.0f, 165.0, 220.0), BandPosition::inside);
  EXPECT_EQ(band_position(164.9f, 165.0, 220.0), BandPosition::below);
  EXPECT_EQ(band_position(220.1f, 165.0, 220.0), BandPosition::above);
  EXPECT_EQ(band_position(std::nullopt, 165.0, 220.0), BandPosition::unvoiced);
  EXPECT_EQ(band_position(std::numeric_limits<float>::quiet_NaN(), 165.0, 220.0), BandPosition::unvoiced);
  EXPECT_EQ(name(BandPosition::below), "below");
  EXPECT_EQ(name(BandPosition::unvoiced), "unvoiced");
}

// Feeds positions one hop apart from t = 0 and returns every change.
std::vector<BandChange> run(BandTracker& t, const std::vector<BandPosition>& raw) {
  std::vector<BandChange> out;
  for (std::size_t i = 0; i < raw.size(); ++i)
    if (auto c = t.update(static_cast<double>(i) * kHop, raw[i])) out.push_back(*c);
  return out;
}

TEST(BandTracker, EnteringIsConfirmedAfterTheDwellAndDatedToItsFirstFrame) {
  BandTracker t(0.2, kHop);
  std::vector<BandPosition> raw(20, BandPosition::unvoiced);   // 0 .. 95 ms
  raw.resize(200, BandPosition::inside);                       // from 100 ms on
  const auto changes = run(t, raw);
  ASSERT_EQ(changes.size(), 1u);
  EXPECT_EQ(changes[0].from, BandPosition::unvoiced);
  EXPECT_EQ(changes[0].to, BandPosition::inside);
  EXPECT_NEAR(changes[0].since_s, 0.100, 1e-9);
  // The dwell is 40 frames; three quarters of them, 30 frames, are in by 100 ms + 29 hops.
  EXPECT_NEAR(changes[0].confirmed_s, 0.245, 1e-9);
  EXPECT_EQ(t.held(), BandPosition::inside);
}

// Vibrato of +-60 cents at 5.5 Hz around 200 Hz (F0 = 200 * 2^(0.6 sin(2 pi 5.5 t) / 12), a synthetic
// series) against a band whose top, 205 Hz, cuts through it: the raw position flips between inside and
// above 11 times a second: above while 0.6 sin > 12 log2(205/200) = 0.428, that is 45 ms of each 182 ms
// cycle, inside for the other 137 ms.
std::vector<BandPosition> vibrato_against_edge(double seconds) {
  std::vector<BandPosition> raw;
  for (double t = 0; t < seconds; t += kHop) {
    const auto f0 = static_cast<float>(200.0 * std::exp2(0.6 * std::sin(2 * 3.14159265358979 * 5.5 * t) / 12.0));
    raw.push_back(band_position(f0, 180.0, 205.0));
  }
  return raw;
}

TEST(BandTracker, AWobbleAtTheEdgeDoesNotFlicker) {
  const auto raw = vibrato_against_edge(3.0);
  int raw_flips = 0;
  for (std::size_t i = 1; i < raw.size(); ++i) raw_flips += raw[i] != raw[i - 1] ? 1 : 0;
  ASSERT_GE(raw_flips, 32);  // the raw series flickers: 2 crossings x 5.5 Hz x 3 s, about 33
  BandTracker held(0.15, kHop);
  const auto changes = run(held, raw);
  ASSERT_EQ(changes.size(), 1u);  // unvoiced -> inside once, then steady
  EXPECT_EQ(changes[0].to, BandPosition::inside);
  BandTracker without(0.0, kHop);
  EXPECT_EQ(static_cast<int>(run(without, raw).size()), raw_flips + 1);  // dwell 0: every raw change
}

TEST(BandTracker, ABriefVoicelessStretchKeepsTheState) {
  BandTracker t(0.15, kHop);
  std::vector<BandPosition> raw(100, BandPosition::inside);
  raw.insert(raw.end(), 22, BandPosition::unvoiced);  // a 110 ms voiceless stretch, under 3/4 of the dwell
  raw.insert(raw.end(), 100, BandPosition::inside);
  const auto changes = run(t, raw);
  ASSERT_EQ(changes.size(), 1u);
  EXPECT_EQ(t.held(), BandPosition::inside);
}

TEST(BandTracker, LeavingForLongerThanTheDwellIsOneChangeEachWay) {
  BandTracker t(0.15, kHop);
  std::vector<BandPosition> raw(100, BandPosition::inside);
  raw.insert(raw.end(), 60, BandPosition::above);  // 300 ms above
  raw.insert(raw.end(), 100, BandPosition::inside);
  const auto changes = run(t, raw);
  ASSERT_EQ(changes.size(), 3u);
  EXPECT_EQ(changes[1].from, BandPosition::inside);
  EXPECT_EQ(changes[1].to, BandPosition::above);
  EXPECT_NEAR(changes[1].since_s, 100 * kHop, 1e-9);
  EXPECT_EQ(changes[2].from, BandPosition::above);
  EXPECT_EQ(changes[2].to, BandPosition::inside);
  EXPECT_NEAR(changes[2].since_s, 160 * kHop, 1e-9);
  t.reset();
  EXPECT_EQ(t.held(), BandPosition::unvoiced);
}

TEST(BandTracker, ABadDwellIsRefused) {
  EXPECT_THROW(BandTracker(-0.1, kHop), std::invalid_argument);
  EXPECT_THROW(BandTracker(std::numeric_limits<double>::quiet_NaN(), kHop), std::invalid_argument);
  EXPECT_THROW(BandTracker(0.2, 0.0), std::invalid_argument);
}

}  // namespace
}  // namespace pitchwire::dsp
