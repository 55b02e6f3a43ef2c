// Tests of the exercise summary (daemon/exercise_summary.h) on frames whose values are known by construction.
#include "pitchwire/daemon/exercise_summary.h"

#include <gtest/gtest.h>

#include <array>
#include <cmath>

namespace pitchwire::daemon {
namespace {

constexpr double kHop = 0.005;

// A 2 s vowel at 200 Hz (400 voiced frames) after 1 s of silence (200 unvoiced frames).
TEST(ExerciseSummary, ATwoSecondVowelAt200HzHasACycleDoseOf400) {
  ExerciseSummary s(kHop);
  const std::vector<protocol::Band> bands = {{"target", 190.0, 210.0}};
  for (int i = 0; i < 200; ++i) s.add(std::nullopt, bands);
  for (int i = 0; i < 400; ++i) s.add(200.0f, bands);
  const protocol::Json j = s.to_json(3.0, {"voiced_s"});
  // Cycle dose: F0 x voiced time = 200 Hz x 2 s = 400 cycles (Titze, Svec & Popolo 2003).
  EXPECT_DOUBLE_EQ(j["cycle_dose"].get<double>(), 400.0);
  EXPECT_DOUBLE_EQ(j["voiced_s"].get<double>(), 2.0);  // phonation time dose
  EXPECT_DOUBLE_EQ(j["settled_s"].get<double>(), 3.0);
  EXPECT_DOUBLE_EQ(j["voiced_fraction"].get<double>(), 0.667);
  EXPECT_DOUBLE_EQ(j["f0_p50_hz"].get<double>(), 200.0);
  EXPECT_DOUBLE_EQ(j["f0_sd_st"].get<double>(), 0.0);
  ASSERT_EQ(j["bands"].size(), 1u);
  EXPECT_EQ(j["bands"][0]["name"], "target");
  EXPECT_DOUBLE_EQ(j["bands"][0]["inside_fraction"].get<double>(), 1.0);
  EXPECT_EQ(j["measures"], protocol::Json::array({"voiced_s"}));
}

// A glide from 100 to 200 Hz, equal steps in semitones over 1201 frames (0 to 12 st): the 5th and 95th
// percentiles (Hyndman & Fan definition 7, linear between ranks) fall at 0.6 and 11.4 st, so the p5-p95 range
// is 10.8 st; a band added halfway counts only the frames while it was active.
TEST(ExerciseSummary, AGlideBetweenKnownNotesHasAKnownRange) {
  ExerciseSummary s(kHop);
  std::vector<protocol::Band> bands = {{"low", 100.0, 141.42}};
  for (int i = 0; i <= 1200; ++i) {
    if (i == 600) bands.push_back({"high", 141.42, 200.0});
    s.add(static_cast<float>(100.0 * std::exp2(i / 100.0 / 12.0)), bands);
  }
  const protocol::Json j = s.to_json(6.0, {});
  EXPECT_NEAR(j["f0_range_st"].get<double>(), 10.8, 0.002);
  EXPECT_NEAR(j["f0_p5_hz"].get<double>(), 100.0 * std::exp2(0.6 / 12.0), 0.002);
  EXPECT_NEAR(j["f0_p95_hz"].get<double>(), 100.0 * std::exp2(11.4 / 12.0), 0.002);
  // Min and max are the glide's ends, 100 and 200 Hz; in semitones re the default reference of 100 Hz
  // (12 log2(f / 100)) the points are 0, 0.6, 6, 11.4 and 12.
  EXPECT_NEAR(j["f0_min_hz"].get<double>(), 100.0, 0.002);
  EXPECT_NEAR(j["f0_max_hz"].get<double>(), 200.0, 0.002);
  EXPECT_EQ(j["reference_hz"].get<double>(), 100.0);
  const std::array<std::pair<const char*, double>, 5> st = {
      {{"f0_min_st", 0.0}, {"f0_p5_st", 0.6}, {"f0_p50_st", 6.0}, {"f0_p95_st", 11.4}, {"f0_max_st", 12.0}}};
  for (const auto& [key, want] : st) EXPECT_NEAR(j[key].get<double>(), want, 0.002) << key;
  // Re a reference an octave up (200 Hz), every semitone value is 12 lower.
  const protocol::Json up = s.to_json(6.0, {}, 200.0);
  for (const auto& [key, want] : st) EXPECT_NEAR(up[key].get<double>(), want - 12.0, 0.002) << key;
  ASSERT_EQ(j["bands"].size(), 2u);
  EXPECT_EQ(j["bands"][0]["name"], "low");
  EXPECT_NEAR(j["bands"][0]["inside_fraction"].get<double>(), 600.0 / 1201.0, 0.001);  // 0..6 st of 0..12 st
  EXPECT_EQ(j["bands"][1]["name"], "high");
  EXPECT_DOUBLE_EQ(j["bands"][1]["inside_fraction"].get<double>(), 1.0);  // active only above 6 st
}

TEST(ExerciseSummary, NoVoicedFrameGivesNullsNotNumbers) {
  ExerciseSummary s(kHop);
  for (int i = 0; i < 10; ++i) s.add(std::nullopt, {{"target", 190.0, 210.0}});
  const protocol::Json j = s.to_json(0.05, {});
  EXPECT_TRUE(j["f0_p50_hz"].is_null());
  EXPECT_TRUE(j["f0_min_st"].is_null() && j["f0_max_hz"].is_null());
  EXPECT_TRUE(j["f0_sd_st"].is_null());
  EXPECT_TRUE(j["bands"][0]["inside_fraction"].is_null());
  EXPECT_DOUBLE_EQ(j["cycle_dose"].get<double>(), 0.0);
}

}  // namespace
}  // namespace pitchwire::daemon
