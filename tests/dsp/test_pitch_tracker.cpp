// Tests of the incremental pitch tracker against outside facts (each check names its source) and of its
// streaming contract (frame times, frame counts, block-size independence, configuration errors).
#include "pitchwire/dsp/pitch_tracker.h"
#include "pitchwire/dsp/units.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <random>
#include <utility>
#include <vector>
#include <functional>

namespace pitchwire::dsp {
namespace {

constexpr double kPi = 3.14159265358979323846;

struct Collect : FrameSink {
  std::vector<LiveFrame> live;
  std::vector<SettledFrame> settled;
  void on_live(const LiveFrame& f) override { live.push_back(f); }
  void on_settled(const SettledFrame& f) override { settled.push_back(f); }
};

Collect run(const std::vector<float>& x, double fs, TrackerConfig cfg = {}) {
  cfg.sample_rate_hz = fs;
  PitchTracker t(cfg);
  Collect c;
  t.process(x, c);
  t.flush(c);
  return c;
}

std::vector<float> sine(double fs, double f, double seconds, double amp = 0.5) {
  std::vector<float> x(static_cast<std::size_t>(std::llround(fs * seconds)));
  for (std::size_t i = 0; i < x.size(); ++i) x[i] = static_cast<float>(amp * std::sin(2 * kPi * f * static_cast<double>(i) / fs));
  return x;
}

// Frames whose window lies wholly inside the signal: the first 40 ms hold the filters' start-up on an
// abrupt onset, the last 25 ms are partly padding, and the settled value averages neighbours up to 20 ms
// away: 20 ms more at either end.
template <typename F>
std::vector<F> interior(const std::vector<F>& frames, double seconds) {
  std::vector<F> out;
  for (const auto& f : frames)
    if (f.time_s >= 0.06 && f.time_s <= seconds - 0.045) out.push_back(f);
  return out;
}

double share_unvoiced(const std::vector<SettledFrame>& frames) {
  std::size_t n = 0;
  for (const auto& f : frames) n += f.f0_hz ? 0 : 1;
  return static_cast<double>(n) / static_cast<double>(frames.size());
}

TEST(PitchTracker, PulseTrainWithA6p6msPeriodReads151p5Hz) {
  // F0 = 1/T: a 6.6 ms period is 151.5 Hz (common practice). Tolerance from the requirement: +-0.3 %.
  for (double fs : {16000.0, 44100.0, 48000.0}) {
    SCOPED_TRACE(fs);
    const double period = 0.0066;
    std::vector<float> x(static_cast<std::size_t>(fs * 1.0));
    // Band-limited pulses: a sum of cosine harmonics below 4 kHz, so every rate sees the same signal.
    for (std::size_t i = 0; i < x.size(); ++i) {
      double v = 0;
      for (int h = 1; h * (1.0 / period) < 4000.0; ++h) v += std::cos(2 * kPi * h * static_cast<double>(i) / (period * fs));
      x[i] = static_cast<float>(0.02 * v);
    }
    const auto frames = interior(run(x, fs).settled, 1.0);
    ASSERT_GT(frames.size(), 150u);
    for (const auto& f : frames) {
      ASSERT_TRUE(f.f0_hz) << "unvoiced at " << f.time_s;
      EXPECT_NEAR(*f.f0_hz, 1.0 / period, 0.003 / period) << "at " << f.time_s;
    }
  }
}

TEST(PitchTracker, EqualTemperedSineTonesA2ToC6WithinTwoCents) {
  // Equal temperament with A4 = 440 Hz (ISO 16:1975): MIDI 45 (A2, 110 Hz) .. 84 (C6, 1046.5 Hz), at the
  // lowest and highest rates taken as well as the usual ones.
  for (double fs : {8000.0, 16000.0, 22050.0, 44100.0, 48000.0, 96000.0}) {
    for (int midi = 45; midi <= 84; ++midi) {
      const double f = hz_from_midi(midi);
      SCOPED_TRACE(testing::Message() << note_name(midi) << " " << f << " Hz at " << fs);
      const auto x = sine(fs, f, 0.4);
      const auto frames = interior(run(x, fs).settled, 0.4);
      double worst = 0;
      for (const auto& f0 : frames) {
        ASSERT_TRUE(f0.f0_hz) << "unvoiced at " << f0.time_s;
        worst = std::max(worst, std::abs(cents(*f0.f0_hz, f)));
      }
      EXPECT_LE(worst, 2.0);
    }
  }
}

TEST(PitchTracker, NoiseSilenceAndHumAloneAreUnvoiced) {
  // Unvoiced sounds carry no F0 (common practice); mains hum is an interferer, not a voice. Bar: >= 99 %.
  const double fs = 16000, seconds = 4.0;
  const auto n = static_cast<std::size_t>(fs * seconds);
  std::mt19937 rng(7);
  std::normal_distribution<float> g(0.0f, 1.0f);
  std::vector<float> white(n), hiss(n), silence(n, 0.0f), hum50(n), hum60(n);
  float prev = 0;
  for (std::size_t i = 0; i < n; ++i) {
    white[i] = 0.1f * g(rng);
    const float w = 0.2f * g(rng);
    hiss[i] = w - prev;  // first difference: a high-passed, /s/-like noise
    prev = w;
    const double t = static_cast<double>(i) / fs;
    double h50 = 0, h60 = 0;
    for (int k = 1; k <= 8; ++k) {
      h50 += 0.2 / k * std::sin(2 * kPi * 50 * k * t + 0.3 * k);
      h60 += 0.2 / k * std::sin(2 * kPi * 60 * k * t + 0.7 * k);
    }
    hum50[i] = static_cast<float>(h50);
    hum60[i] = static_cast<float>(h60);
  }
  struct Case {
    const char* name;
    const std::vector<float>* x;
  };
  for (const Case& c : {Case{"white noise", &white}, Case{"hiss", &hiss}, Case{"silence", &silence},
                        Case{"50 Hz hum", &hum50}, Case{"60 Hz hum", &hum60}}) {
    SCOPED_TRACE(c.name);
    const auto out = run(*c.x, fs);
    EXPECT_GE(share_unvoiced(out.settled), 0.99);
    std::size_t live_voiced = 0;
    for (const auto& f : out.live) live_voiced += f.f0_hz ? 1 : 0;
    EXPECT_LE(static_cast<double>(live_voiced) / static_cast<double>(out.live.size()), 0.01);
  }
}

TEST(PitchTracker, GlideIsFollowedWithoutOctaveJumps) {
  // An exponential glide 100 -> 800 Hz over 1.5 s (3 octaves, 24 semitones per second), harmonic-rich.
  const double fs = 44100, seconds = 1.5;
  std::vector<float> x(static_cast<std::size_t>(fs * seconds));
  double phase = 0;
  for (std::size_t i = 0; i < x.size(); ++i) {
    const double t = static_cast<double>(i) / fs;
    const double f = 100.0 * std::exp2(3.0 * t / seconds);
    phase += 2 * kPi * f / fs;
    double v = 0;
    for (int h = 1; h <= 6 && h * f < 8000; ++h) v += std::sin(h * phase) / h;
    x[i] = static_cast<float>(0.3 * v);
  }
  const auto frames = interior(run(x, fs).settled, seconds);
  for (const auto& f : frames) {
    ASSERT_TRUE(f.f0_hz) << "unvoiced at " << f.time_s;
    const double truth = 100.0 * std::exp2(3.0 * f.time_s / seconds);
    EXPECT_LT(std::abs(cents(*f.f0_hz, truth)), 50.0) << "at " << f.time_s;
  }
}

// A harmonic-rich tone (1/h amplitudes, 6 harmonics) from t0 to t1 seconds, added into x.
void add_voice(std::vector<float>& x, double fs, double f, double amp, double t0, double t1) {
  for (auto i = static_cast<std::size_t>(t0 * fs); i < std::min(x.size(), static_cast<std::size_t>(t1 * fs)); ++i) {
    const double t = static_cast<double>(i) / fs;
    double v = 0;
    for (int h = 1; h <= 6; ++h) v += std::sin(2 * kPi * f * h * t) / h;
    x[i] += static_cast<float>(amp * v);
  }
}

double voiced_share(const std::vector<SettledFrame>& frames, double t0, double t1) {
  std::size_t n = 0, v = 0;
  for (const auto& f : frames)
    if (f.time_s >= t0 && f.time_s < t1) {
      ++n;
      v += f.f0_hz ? 1 : 0;
    }
  return n ? static_cast<double>(v) / static_cast<double>(n) : 0.0;
}

TEST(PitchTracker, AQuieterSecondVoiceFarInPitchIsNotTakenForTheSpeaker) {
  // The speaker at 220 Hz for 2 s, a pause with another voice 12 dB quieter an octave lower, the speaker
  // again. Another voice in the room is an interferer (the speaker model in docs/estimator.md).
  const double fs = 16000;
  std::vector<float> x(static_cast<std::size_t>(4.0 * fs), 0.0f);
  add_voice(x, fs, 220, 0.3, 0.0, 2.0);
  add_voice(x, fs, 110, 0.3 * std::pow(10.0, -12.0 / 20), 2.1, 2.9);
  add_voice(x, fs, 220, 0.3, 3.0, 4.0);
  const auto out = run(x, fs).settled;
  EXPECT_GE(voiced_share(out, 0.1, 1.9), 0.99);
  EXPECT_LE(voiced_share(out, 2.2, 2.8), 0.01);
  EXPECT_GE(voiced_share(out, 3.1, 3.9), 0.99);
}

TEST(PitchTracker, TheSpeakerMovingFarInPitchAtFullLevelIsFollowed) {
  // The same speaker jumping an octave and a fifth down at the same level stays voiced and is followed.
  const double fs = 16000;
  std::vector<float> x(static_cast<std::size_t>(4.0 * fs), 0.0f);
  add_voice(x, fs, 330, 0.3, 0.0, 2.0);
  add_voice(x, fs, 110, 0.3, 2.1, 4.0);
  const auto out = run(x, fs).settled;
  EXPECT_GE(voiced_share(out, 2.2, 3.9), 0.99);
  for (const auto& f : out)
    if (f.time_s > 2.2 && f.time_s < 3.9 && f.f0_hz) {
      EXPECT_LT(std::abs(cents(*f.f0_hz, 110)), 50.0) << f.time_s;
    }
}

TEST(PitchTracker, SpeakingAgainAfterLoudHighSingingIsStillTheSpeaker) {
  // A coach speaks near 200 Hz, sings loud notes 19 semitones higher for 3 s, then speaks again at the
  // first level: every register the voice has used stays the speaker's.
  const double fs = 16000;
  std::vector<float> x(static_cast<std::size_t>(9.0 * fs), 0.0f);
  add_voice(x, fs, 200, 0.1, 0.0, 3.0);
  add_voice(x, fs, 600, 0.4, 3.1, 6.0);
  add_voice(x, fs, 200, 0.1, 6.1, 9.0);
  const auto out = run(x, fs).settled;
  EXPECT_GE(voiced_share(out, 0.1, 2.9), 0.99);
  EXPECT_GE(voiced_share(out, 3.2, 5.9), 0.99);
  EXPECT_GE(voiced_share(out, 6.2, 8.9), 0.99);
}

TEST(PitchTracker, FrameTimesAreWindowCentresAndEveryHopWithinTheInputGetsAFrame) {
  // Frames are centred on k * hop for every k with k * hop <= duration, counted in samples: 48 kHz makes
  // every hop a whole number of samples. 1.2 s is a whole number of hops (1.2 / 0.005 is 239.999... in
  // floating point, so the count must not come from a division of seconds).
  for (const auto& [hop, samples] : std::vector<std::pair<double, std::size_t>>{
           {2.5, 48144}, {5.0, 48144}, {10.0, 48144}, {5.0, 57600}, {2.5, 57600}}) {
    SCOPED_TRACE(testing::Message() << hop << " ms, " << samples << " samples");
    TrackerConfig cfg;
    cfg.hop_ms = hop;
    const double fs = 48000;
    const auto hop_samples = static_cast<std::size_t>(hop * 48);
    const auto out = run(sine(fs, 200, static_cast<double>(samples) / fs), fs, cfg);
    const std::size_t expected = samples / hop_samples + 1;
    ASSERT_EQ(out.live.size(), expected);
    ASSERT_EQ(out.settled.size(), expected);
    for (std::size_t k = 0; k < expected; ++k) {
      EXPECT_EQ(out.settled[k].index, static_cast<std::int64_t>(k));
      EXPECT_NEAR(out.settled[k].time_s, static_cast<double>(k) * hop * 1e-3, 0.5 / 16000.0);
      EXPECT_EQ(out.live[k].index, static_cast<std::int64_t>(k));
    }
  }
}

TEST(PitchTracker, OnsetIsPlacedAtTheRightTime) {
  // A tone starting at 0.5 s: the first voiced settled frame is within one hop of 0.5 s, at every rate.
  for (double fs : {16000.0, 44100.0, 48000.0}) {
    SCOPED_TRACE(fs);
    auto x = sine(fs, 180, 1.0);
    for (std::size_t i = 0; i < static_cast<std::size_t>(0.5 * fs); ++i) x[i] = 0;
    const auto out = run(x, fs);
    double first = -1;
    for (const auto& f : out.settled)
      if (f.f0_hz) {
        first = f.time_s;
        break;
      }
    EXPECT_NEAR(first, 0.5, 0.0051);
  }
}

TEST(PitchTracker, SameFramesWhateverTheBlockSizes) {
  const double fs = 44100;
  std::vector<float> x(static_cast<std::size_t>(fs * 1.2));
  std::mt19937 rng(3);
  std::normal_distribution<float> g(0.0f, 0.02f);
  double phase = 0;
  for (std::size_t i = 0; i < x.size(); ++i) {
    const double t = static_cast<double>(i) / fs;
    phase += 2 * kPi * (150 + 40 * std::sin(2 * kPi * 2 * t)) / fs;
    x[i] = static_cast<float>(0.3 * (std::sin(phase) + 0.5 * std::sin(2 * phase))) + g(rng);
  }
  TrackerConfig cfg;
  cfg.sample_rate_hz = fs;
  auto run_blocks = [&](auto next_size) {
    PitchTracker t(cfg);
    Collect c;
    std::size_t pos = 0;
    while (pos < x.size()) {
      const std::size_t n = std::min(next_size(), x.size() - pos);
      t.process(std::span<const float>(x.data() + pos, n), c);
      pos += n;
    }
    t.flush(c);
    return c;
  };
  const auto whole = run_blocks([&] { return x.size(); });
  std::mt19937 sizes(11);
  std::uniform_int_distribution<std::size_t> any(1, 8192);
  for (auto next : std::vector<std::function<std::size_t()>>{[] { return std::size_t{1}; },
                                                                [] { return std::size_t{7}; },
                                                                [] { return std::size_t{8192}; },
                                                                [&] { return any(sizes); }}) {
    const auto blocks = run_blocks(next);
    ASSERT_EQ(blocks.settled.size(), whole.settled.size());
    for (std::size_t k = 0; k < whole.settled.size(); ++k) {
      const auto& a = whole.settled[k];
      const auto& b = blocks.settled[k];
      ASSERT_EQ(a.f0_hz.has_value(), b.f0_hz.has_value()) << k;
      if (a.f0_hz) {
        EXPECT_NEAR(*a.f0_hz, *b.f0_hz, 1e-3) << k;
      }
      EXPECT_NEAR(a.level_dbfs, b.level_dbfs, 1e-3) << k;
    }
  }
}

TEST(PitchTracker, LevelOfAFullScaleSineIsZeroDbfs) {
  // AES17: the RMS of a full-scale sine reads 0 dBFS. 1 kHz: a whole number of periods per 5 ms hop.
  const auto out = run(sine(48000, 1000, 0.5, 1.0), 48000);
  for (const auto& f : interior(out.settled, 0.5)) EXPECT_NEAR(f.level_dbfs, 0.0, 0.01) << f.time_s;
  const auto quiet = run(sine(48000, 1000, 0.5, 0.01), 48000);
  for (const auto& f : interior(quiet.settled, 0.5)) EXPECT_NEAR(f.level_dbfs, -40.0, 0.01) << f.time_s;
}

TEST(PitchTracker, QuietInputIsStillTracked) {
  // Peaks near -30 dBFS must not be taken for silence.
  const auto frames = interior(run(sine(16000, 196, 1.0, 0.03), 16000).settled, 1.0);
  for (const auto& f : frames) {
    ASSERT_TRUE(f.f0_hz) << f.time_s;
    EXPECT_LT(std::abs(cents(*f.f0_hz, 196)), 2.0);
  }
}

TEST(PitchTracker, SettledValueCarriesTheLiveValue) {
  const auto out = run(sine(16000, 300, 0.5), 16000);
  ASSERT_EQ(out.live.size(), out.settled.size());
  for (std::size_t k = 0; k < out.live.size(); ++k) {
    ASSERT_EQ(out.live[k].f0_hz.has_value(), out.settled[k].live_f0_hz.has_value());
    if (out.live[k].f0_hz) {
      EXPECT_EQ(*out.live[k].f0_hz, *out.settled[k].live_f0_hz);
    }
  }
}

// Records, for every live frame, how much input had been given when it came out.
struct EmissionClock : FrameSink {
  std::int64_t fed = 0;
  std::vector<std::pair<LiveFrame, std::int64_t>> live;
  void on_live(const LiveFrame& f) override { live.emplace_back(f, fed); }
  void on_settled(const SettledFrame&) override {}
};

EmissionClock feed_in_blocks(const std::vector<float>& x, PitchTracker& t, std::size_t block) {
  EmissionClock c;
  for (std::size_t pos = 0; pos < x.size(); pos += block) {
    const std::size_t n = std::min(block, x.size() - pos);
    c.fed = static_cast<std::int64_t>(pos + n);
    t.process(std::span<const float>(x.data() + pos, n), c);
  }
  return c;
}

// live_latency_s() is a bound the stream keeps: at 48 kHz in 1 ms blocks, every live frame is out by the
// end of the block in which the input reached its centre plus live_latency_s(), half the 40 ms window and
// the resampler's 2.4 ms. A 100 Hz voice (below the short window's lags) takes that long; a 220 Hz voice
// gets its frames from the short window, 10 ms sooner (docs/estimator.md).
TEST(PitchTracker, LiveFramesComeOutWithinTheStatedLatency) {
  const double fs = 48000;
  TrackerConfig cfg;
  cfg.sample_rate_hz = fs;
  for (const double f0 : {100.0, 220.0}) {
    PitchTracker t(cfg);
    EXPECT_NEAR(t.live_latency_s(), 0.020 + 0.0024, 0.0002);
    const auto out = feed_in_blocks(sine(fs, f0, 1.0), t, 48);
    std::size_t checked = 0;
    double worst = 0;
    for (const auto& [frame, fed] : out.live) {
      if (frame.time_s < 0.1 || !frame.f0_hz) continue;
      const double after_centre = static_cast<double>(fed) / fs - frame.time_s;
      worst = std::max(worst, after_centre);
      ++checked;
    }
    ASSERT_GT(checked, 150u) << f0 << " Hz";
    EXPECT_LE(worst, t.live_latency_s() + 0.001) << f0 << " Hz";
    if (f0 > 125.0) {
      EXPECT_LE(worst, t.live_latency_s() - 0.010 + 0.001) << f0 << " Hz";
    }
  }
}

// An F0 step between two clear stretches: every hop still gets exactly one live frame, in order, and the
// frames after the step read the new F0.
TEST(PitchTracker, LiveFramesAcrossAnF0StepKeepTheirOrder) {
  const double fs = 48000;
  std::vector<float> x = sine(fs, 165, 0.6);
  const std::vector<float> high = sine(fs, 220, 0.6);
  x.insert(x.end(), high.begin(), high.end());
  TrackerConfig cfg;
  cfg.sample_rate_hz = fs;
  PitchTracker t(cfg);
  const auto out = feed_in_blocks(x, t, 256);
  ASSERT_GT(out.live.size(), 200u);
  for (std::size_t k = 0; k < out.live.size(); ++k) ASSERT_EQ(out.live[k].first.index, static_cast<std::int64_t>(k));
  for (const auto& [frame, fed] : out.live) {
    if (frame.time_s > 0.65 && frame.time_s < 1.1) {
      ASSERT_TRUE(frame.f0_hz.has_value()) << frame.time_s;
      EXPECT_NEAR(*frame.f0_hz, 220.0, 220.0 * 0.03) << frame.time_s;
    }
  }
}

TEST(PitchTracker, NonFiniteSamplesAreCountedAndTreatedAsSilence) {
  auto x = sine(16000, 200, 0.5);
  x[100] = std::nanf("");
  x[200] = INFINITY;
  TrackerConfig cfg;
  PitchTracker t(cfg);
  Collect c;
  t.process(x, c);
  t.flush(c);
  EXPECT_EQ(t.nonfinite_samples(), 2);
  for (const auto& f : c.settled) {
    if (f.f0_hz) {
      EXPECT_TRUE(std::isfinite(*f.f0_hz));
    }
  }
}

TEST(TrackerConfig, BadValuesNameTheField) {
  struct Case {
    TrackerConfig cfg;
    const char* field;
  };
  std::vector<Case> cases;
  TrackerConfig c;
  c.sample_rate_hz = 4000;
  cases.push_back({c, "sample_rate_hz"});
  c = {};
  c.hop_ms = 20;
  cases.push_back({c, "hop_ms"});
  c = {};
  c.f0_min_hz = std::nan("");
  cases.push_back({c, "f0_min_hz"});
  c = {};
  c.f0_max_hz = 60;
  cases.push_back({c, "f0_max_hz"});
  c = {};
  c.settle_ms = -1;
  cases.push_back({c, "settle_ms"});
  for (const auto& k : cases) {
    const std::string err = k.cfg.validate();
    EXPECT_NE(err.find(k.field), std::string::npos) << err;
    EXPECT_THROW(PitchTracker{k.cfg}, std::invalid_argument);
  }
  EXPECT_EQ(TrackerConfig{}.validate(), "");
}

}  // namespace
}  // namespace pitchwire::dsp
