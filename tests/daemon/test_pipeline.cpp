// test_pipeline.cpp: the sample ring, the paced file source and the analysis thread, without the network.
#include <cmath>
#include <gtest/gtest.h>
#include <sndfile.h>

#include <chrono>
#include <condition_variable>
#include <mutex>
#include <set>
#include <string>
#include <thread>
#include <vector>

#include "pitchwire/daemon/audio_source.h"
#include "pitchwire/daemon/pipeline.h"
#include "pitchwire/dsp/voice_synth.h"
#include "test_audio.h"

namespace pitchwire::daemon {
namespace {

using namespace std::chrono_literals;

TEST(SampleRing, KeepsOrderAndCountsWhatDoesNotFit) {
  SampleRing ring(100);
  std::vector<float> in(150);
  for (std::size_t i = 0; i < in.size(); ++i) in[i] = static_cast<float>(i);
  ring.write(in.data(), in.size());
  EXPECT_EQ(ring.written(), 100);
  EXPECT_EQ(ring.lost(), 50);
  std::vector<float> out(200);
  ASSERT_EQ(ring.read(out.data(), out.size()), 100u);
  for (std::size_t i = 0; i < 100; ++i) ASSERT_EQ(out[i], static_cast<float>(i)) << i;
  EXPECT_EQ(ring.read(out.data(), out.size()), 0u);
}

// Collects what the analysis thread hands over, and says when the input has ended.
class Collector final : public PipelineListener {
 public:
  void on_live(const dsp::LiveFrame& f) override {
    std::lock_guard lock(mutex_);
    live.push_back(f);
  }
  void on_settled(const dsp::SettledFrame& f) override {
    std::lock_guard lock(mutex_);
    settled.push_back(f);
  }
  void on_stats(const protocol::Stats& s) override {
    std::lock_guard lock(mutex_);
    stats.push_back(s);
  }
  void on_event(const protocol::Event& e) override {
    std::lock_guard lock(mutex_);
    events.push_back(e);
  }
  void on_end() override {
    std::lock_guard lock(mutex_);
    ended = true;
    cv_.notify_all();
  }
  bool wait_end(std::chrono::milliseconds timeout) {
    std::unique_lock lock(mutex_);
    return cv_.wait_for(lock, timeout, [this] { return ended; });
  }
  std::vector<dsp::LiveFrame> live;
  std::vector<dsp::SettledFrame> settled;
  std::vector<protocol::Stats> stats;
  std::vector<protocol::Event> events;
  bool ended = false;

 private:
  std::mutex mutex_;
  std::condition_variable cv_;
};

class OfflineSink final : public dsp::FrameSink {
 public:
  void on_live(const dsp::LiveFrame& f) override { live.push_back(f); }
  void on_settled(const dsp::SettledFrame& f) override { settled.push_back(f); }
  std::vector<dsp::LiveFrame> live;
  std::vector<dsp::SettledFrame> settled;
};

class NoEvents final : public SourceListener {
 public:
  void on_device_lost(const std::string& d, const std::string& r) override { ADD_FAILURE() << d << ": " << r; }
  void on_device_back(const std::string&) override {}
};

// A file replayed in real time through the ring gives exactly the frames of the offline tracker over the
// same samples (`pitchwire analyze` runs that): one code path, whatever the blocks and the timing.
TEST(Pipeline, FileReplayGivesTheFramesOfTheOfflineTracker) {
  testing::TempDir dir;
  const double rate = 16000.0;
  dsp::Rendered voice = dsp::render_demo_session(rate);
  voice.samples.resize(static_cast<std::size_t>(1.5 * rate));  // 1.5 s: speech with pauses
  const auto path = dir / "voice.wav";
  testing::write_sound(path, SF_FORMAT_WAV | SF_FORMAT_FLOAT, static_cast<int>(rate), 1, voice.samples);

  SourceOptions source_options;
  source_options.loop = false;
  source_options.buffer_frames = 160;
  auto source = make_file_source(path.string(), source_options);
  SampleRing ring(static_cast<std::size_t>(rate));
  NoEvents no_events;
  Collector collector;
  PipelineOptions options;
  options.stats_interval_s = 0.5;
  options.stats_window_s = 1.0;
  const auto t0 = std::chrono::steady_clock::now();
  source->start(ring, no_events);
  EXPECT_EQ(source->sample_rate_hz(), rate);
  Pipeline pipeline(ring, *source, options, collector);
  pipeline.start();
  ASSERT_TRUE(collector.wait_end(20s));
  const double elapsed = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  pipeline.stop();
  source->stop();
  // Paced at real time: not faster than the audio lasts (a little slack for the clock's start).
  EXPECT_GE(elapsed, 1.5 * 0.9);

  dsp::TrackerConfig config = options.tracker;
  config.sample_rate_hz = rate;
  dsp::PitchTracker tracker(config);
  OfflineSink offline;
  tracker.process(voice.samples, offline);
  tracker.flush(offline);

  ASSERT_EQ(collector.live.size(), offline.live.size());
  ASSERT_EQ(collector.settled.size(), offline.settled.size());
  for (std::size_t i = 0; i < offline.settled.size(); ++i) {
    SCOPED_TRACE(i);
    EXPECT_EQ(collector.live[i].index, offline.live[i].index);
    EXPECT_EQ(collector.live[i].time_s, offline.live[i].time_s);
    EXPECT_EQ(collector.live[i].f0_hz, offline.live[i].f0_hz);
    EXPECT_EQ(collector.settled[i].f0_hz, offline.settled[i].f0_hz);
  }
  // A stats message every 0.5 s of settled frames (100 hops of 5 ms).
  EXPECT_EQ(collector.stats.size(), offline.settled.size() / 100);
  EXPECT_TRUE(collector.events.empty());
  EXPECT_NEAR(pipeline.audio_time_s(), 1.5, 1e-9);
}

// A source under the test's control: writes nothing itself, finishes when told.
class ManualSource final : public AudioSource {
 public:
  std::string describe() const override { return "manual"; }
  void start(SampleRing&, SourceListener&) override {}
  void stop() noexcept override {}
  double sample_rate_hz() const override { return 8000.0; }
  int channel() const override { return 1; }
  bool finished() const override { return finished_.load(); }
  std::atomic<bool> finished_{false};
};

// Samples the ring could not hold are reported in an overflow event and analysed as silence, so the
// audio clock stays the capture clock.
TEST(Pipeline, OverflowIsReportedAndTheClockKeepsTheLostSamples) {
  ManualSource source;
  SampleRing ring(1000);
  std::vector<float> burst(5000, 0.0f);
  ring.write(burst.data(), burst.size());  // 4000 lost before analysis starts
  ASSERT_EQ(ring.lost(), 4000);
  Collector collector;
  Pipeline pipeline(ring, source, PipelineOptions{}, collector);
  pipeline.start();
  const auto deadline = std::chrono::steady_clock::now() + 10s;
  while (pipeline.audio_time_s() < 5000.0 / 8000.0 && std::chrono::steady_clock::now() < deadline) {
    std::this_thread::sleep_for(1ms);
  }
  source.finished_.store(true);
  ASSERT_TRUE(collector.wait_end(10s));
  pipeline.stop();
  ASSERT_EQ(collector.events.size(), 1u);
  EXPECT_EQ(collector.events[0].kind, protocol::EventKind::kOverflow);
  EXPECT_EQ(collector.events[0].payload.at("samples_lost"), 4000);
  EXPECT_NEAR(pipeline.audio_time_s(), 5000.0 / 8000.0, 1e-12);
  // Silence is unvoiced.
  for (const auto& f : collector.settled) EXPECT_FALSE(f.f0_hz.has_value());
}

// Target bands on a voice whose F0 is known by construction: sine tones of 200 Hz (0-1 s), 300 Hz (1-2 s) and
// 200 Hz (2-3 s) at 8 kHz. Band "target" (180-220 Hz) is entered, left upwards and entered again, each change
// dated to within four hops of the tone's start; band "low" (100-150 Hz) is above the voice throughout and
// changes once. The statistics carry the time inside each band over their window and the held state.
TEST(Pipeline, BandCrossingsAndTimeInsideFollowTheVoice) {
  ManualSource source;
  SampleRing ring(3 * 8000 + 100);
  std::vector<float> x;
  for (const double f0 : {200.0, 300.0, 200.0}) {
    for (int i = 0; i < 8000; ++i) x.push_back(static_cast<float>(0.3 * std::sin(2 * 3.14159265358979 * f0 * i / 8000.0)));
  }
  ring.write(x.data(), x.size());
  Collector collector;
  PipelineOptions options;
  options.stats_window_s = 0.5;
  options.stats_interval_s = 0.25;
  options.band_dwell_s = 0.2;
  Pipeline pipeline(ring, source, options, collector);
  pipeline.set_bands({{"target", 180.0, 220.0}, {"low", 100.0, 150.0}});
  pipeline.start();
  const auto deadline = std::chrono::steady_clock::now() + 10s;
  while (pipeline.audio_time_s() < 3.0 && std::chrono::steady_clock::now() < deadline) std::this_thread::sleep_for(1ms);
  source.finished_.store(true);
  ASSERT_TRUE(collector.wait_end(10s));
  pipeline.stop();

  struct Crossing { std::string name, from, to; double since_s, time_s; };
  std::vector<Crossing> crossings;
  for (const auto& e : collector.events) {
    ASSERT_EQ(e.kind, protocol::EventKind::kBandCrossing);
    crossings.push_back({e.payload.at("name"), e.payload.at("from"), e.payload.at("to"), e.payload.at("since_s"), e.time_s});
  }
  std::vector<Crossing> target, low;
  for (const auto& c : crossings) (c.name == "target" ? target : low).push_back(c);
  ASSERT_EQ(target.size(), 3u);
  EXPECT_EQ(target[0].from + ">" + target[0].to, "unvoiced>inside");
  EXPECT_EQ(target[1].from + ">" + target[1].to, "inside>above");
  EXPECT_EQ(target[2].from + ">" + target[2].to, "above>inside");
  // Live frames centred up to 20 ms from a tone change see both tones in their window; the live path
  // reaches the new tone within four hops of the change.
  EXPECT_NEAR(target[1].since_s, 1.0, 0.021);
  EXPECT_NEAR(target[2].since_s, 2.0, 0.021);
  for (const auto& c : target) {
    EXPECT_GE(c.time_s - c.since_s, 0.75 * 0.2 - 0.006);  // confirmed after three quarters of the dwell
    EXPECT_LE(c.time_s - c.since_s, 0.2);
  }
  ASSERT_EQ(low.size(), 1u);
  EXPECT_EQ(low[0].from + ">" + low[0].to, "unvoiced>above");

  // Statistics: a window wholly in the 200 Hz tone is all inside, one wholly in the 300 Hz tone none.
  bool saw_inside = false, saw_above = false;
  for (const auto& st : collector.stats) {
    ASSERT_EQ(st.bands.size(), 2u);
    EXPECT_EQ(st.bands[0].name, "target");
    EXPECT_EQ(st.bands[1].name, "low");
    if (st.time_s > 0.7 && st.time_s < 0.95) {
      ASSERT_TRUE(st.bands[0].inside_fraction.has_value());
      EXPECT_EQ(*st.bands[0].inside_fraction, 1.0) << st.time_s;
      EXPECT_EQ(st.bands[0].state, protocol::BandPosition::kInside) << st.time_s;
      EXPECT_EQ(*st.bands[1].inside_fraction, 0.0) << st.time_s;
      // A sine of amplitude 0.3 is at 20 log10(0.3) = -10.46 dBFS (AES17: full-scale sine = 0 dBFS), every
      // frame alike; its F0 is 200 Hz throughout.
      ASSERT_TRUE(st.level_mean_dbfs && st.level_max_dbfs);
      EXPECT_NEAR(*st.level_mean_dbfs, 20.0 * std::log10(0.3), 0.05) << st.time_s;
      EXPECT_NEAR(*st.level_max_dbfs, 20.0 * std::log10(0.3), 0.05) << st.time_s;
      ASSERT_TRUE(st.f0_min_hz && st.f0_max_hz && st.f0_range_st);
      EXPECT_NEAR(*st.f0_min_hz, 200.0, 1.0);
      EXPECT_NEAR(*st.f0_max_hz, 200.0, 1.0);
      EXPECT_NEAR(*st.f0_range_st, 0.0, 0.05);
      // Not calibrated (no spl_offset_db): no level in dB SPL.
      EXPECT_FALSE(st.level_mean_db_spl || st.level_max_db_spl);
      saw_inside = true;
    }
    if (st.time_s > 1.7 && st.time_s < 1.95) {
      ASSERT_TRUE(st.bands[0].inside_fraction.has_value());
      EXPECT_EQ(*st.bands[0].inside_fraction, 0.0) << st.time_s;
      EXPECT_EQ(st.bands[0].state, protocol::BandPosition::kAbove) << st.time_s;
      saw_above = true;
    }
  }
  EXPECT_TRUE(saw_inside);
  EXPECT_TRUE(saw_above);
}

// Doses, the stability window and the calibrated level, on a voice known by construction (8 kHz, sine of
// amplitude 0.3): 200 Hz for 2 s, then 2 s of vibrato of +-1 semitone at 5 Hz around 200 Hz, then 2 s of
// 200 Hz again.
// - Cycle dose (Titze, Svec & Popolo 2003: the number of vocal fold cycles, sum of F0 x time over voiced
//   time): a 2 s vowel at 200 Hz has 400 cycles, so the session dose at 2 s is 400.
// - Stability: sine vibrato of depth +-d semitones has SD d / sqrt(2) (docs/measures.md), 0.707 st here;
//   a steady tone has 0. With a 1 s stability window inside a 5 s statistics window, the SD follows the
//   last second while the p5-p95 range still holds the vibrato.
// - Level: a sine of amplitude 0.3 is -10.46 dBFS (AES17); with a calibration offset of 100 dB, 89.54 dB SPL.
// - Dose limits of 1.5 s voiced and 300 cycles are passed at 1.5 s, each reported once.
TEST(Pipeline, DosesStabilityWindowAndCalibratedLevel) {
  constexpr double kRate = 8000.0, kPi = 3.14159265358979323846;
  ManualSource source;
  SampleRing ring(static_cast<std::size_t>(6 * kRate) + 100);
  std::vector<float> x;
  double phase = 0.0;
  for (int i = 0; i < static_cast<int>(6 * kRate); ++i) {
    const double t = i / kRate;
    const double f0 = (t >= 2.0 && t < 4.0) ? 200.0 * std::exp2(std::sin(2 * kPi * 5.0 * (t - 2.0)) / 12.0) : 200.0;
    x.push_back(static_cast<float>(0.3 * std::sin(phase)));
    phase += 2 * kPi * f0 / kRate;
  }
  ring.write(x.data(), x.size());
  Collector collector;
  PipelineOptions options;
  // A search range from 100 Hz: an analysis window of 2 / 100 Hz = 20 ms, which reads a 5 Hz vibrato with
  // its depth within 2 % (docs/measures.md: the default 40 ms window reads it about 10 % shallower).
  options.tracker.f0_min_hz = 100.0;
  options.stats_window_s = 5.0;
  options.stability_window_s = 1.0;
  options.stats_interval_s = 0.25;
  options.spl_offset_db = 100.0;
  options.reference_hz = 400.0;  // semitone values re 400 Hz: 200 Hz is -12 st
  options.dose_limit_voiced_s = 1.5;
  options.dose_limit_cycles = 300.0;
  Pipeline pipeline(ring, source, options, collector);
  pipeline.start();
  const auto deadline = std::chrono::steady_clock::now() + 20s;
  while (pipeline.audio_time_s() < 6.0 && std::chrono::steady_clock::now() < deadline) std::this_thread::sleep_for(1ms);
  source.finished_.store(true);
  ASSERT_TRUE(collector.wait_end(10s));
  pipeline.stop();

  bool saw_dose = false, saw_vibrato = false, saw_steady = false;
  for (const auto& st : collector.stats) {
    SCOPED_TRACE(st.time_s);
    ASSERT_TRUE(st.level_mean_dbfs && st.level_mean_db_spl && st.level_max_db_spl);
    EXPECT_NEAR(*st.level_mean_db_spl, 100.0 + 20.0 * std::log10(0.3), 0.05);
    EXPECT_NEAR(*st.level_mean_db_spl - *st.level_mean_dbfs, 100.0, 0.011);
    EXPECT_NEAR(*st.level_max_db_spl - *st.level_max_dbfs, 100.0, 0.011);
    if (std::fabs(st.time_s - 1.995) < 0.003) {  // the last frame of the first 2 s (frames 0 to 399)
      // Onset: the first frames, whose window starts before the tone, may be unvoiced (at most 4 hops).
      EXPECT_NEAR(st.session_cycle_dose, 400.0, 4.0);
      EXPECT_LE(st.session_cycle_dose, 400.5);
      EXPECT_NEAR(st.session_voiced_s, 2.0, 0.02);
      ASSERT_TRUE(st.reference_hz && st.f0_min_st && st.f0_p50_st && st.f0_max_st);
      EXPECT_EQ(*st.reference_hz, 400.0);
      EXPECT_NEAR(*st.f0_p50_st, -12.0, 0.01);  // 12 log2(200 / 400)
      EXPECT_NEAR(*st.f0_min_st, -12.0, 0.1);  // the extremes hold the onset's frames: within 10 cents
      EXPECT_NEAR(*st.f0_max_st, -12.0, 0.1);
      saw_dose = true;
    }
    if (st.time_s > 3.3 && st.time_s < 3.95) {  // the last second is all vibrato
      ASSERT_TRUE(st.f0_sd_st);
      EXPECT_NEAR(*st.f0_sd_st, 1.0 / std::sqrt(2.0), 0.05);
      saw_vibrato = true;
    }
    if (st.time_s > 5.3 && st.time_s < 5.95) {  // the last second is steady; the last five hold vibrato
      ASSERT_TRUE(st.f0_sd_st && st.f0_range_st);
      EXPECT_LT(*st.f0_sd_st, 0.05);
      EXPECT_GT(*st.f0_range_st, 1.0);
      EXPECT_NEAR(st.window_s, 5.0, 0.006);
      saw_steady = true;
    }
  }
  EXPECT_TRUE(saw_dose && saw_vibrato && saw_steady);

  std::vector<protocol::Event> limits;
  for (const auto& e : collector.events) {
    if (e.kind == protocol::EventKind::kDoseLimit) limits.push_back(e);
  }
  ASSERT_EQ(limits.size(), 2u);
  for (const auto& e : limits) {
    SCOPED_TRACE(e.payload.dump());
    EXPECT_NEAR(e.time_s, 1.5, 0.03);
    EXPECT_GE(e.payload.at("value").get<double>(), e.payload.at("limit").get<double>());
  }
  std::set<std::string> measures;
  for (const auto& e : limits) {
    const std::string measure = e.payload.at("measure");
    measures.insert(measure);
    EXPECT_EQ(e.payload.at("limit").get<double>(), measure == "voiced_s" ? 1.5 : 300.0);
  }
  EXPECT_EQ(measures, (std::set<std::string>{"voiced_s", "cycle_dose"}));
}

TEST(Sources, AFileThatIsNotThereIsAOneLineErrorNamingIt) {
  NoEvents no_events;
  SampleRing ring(100);
  auto source = make_file_source("/nonexistent/voice.wav", SourceOptions{});
  try {
    source->start(ring, no_events);
    FAIL() << "no error";
  } catch (const SourceError& e) {
    const std::string what = e.what();
    EXPECT_NE(what.find("/nonexistent/voice.wav"), std::string::npos) << what;
    EXPECT_NE(what.find("no such file"), std::string::npos) << what;
    EXPECT_EQ(what.find('\n'), std::string::npos) << what;
  }
}

TEST(Sources, TheDemoLoopsAtItsOwnRate) {
  NoEvents no_events;
  SampleRing ring(64000);
  SourceOptions options;
  options.buffer_frames = 320;
  auto source = make_demo_source(options);
  source->start(ring, no_events);
  EXPECT_EQ(source->sample_rate_hz(), 16000.0);
  std::this_thread::sleep_for(300ms);
  source->stop();
  // About 0.3 s of samples at 16 kHz (pacing, with slack for a loaded machine).
  EXPECT_GT(ring.written(), 2000);
  EXPECT_LT(ring.written(), 16000);
  EXPECT_FALSE(source->finished());
}

}  // namespace
}  // namespace pitchwire::daemon

namespace pitchwire::daemon {
namespace {

// A loss is placed where it happened: the reader gets the samples before it, then the count, then the
// samples after it (the capture clock is kept by putting silence of that length in between).
TEST(SampleRing, ALossIsPlacedWhereItHappened) {
  SampleRing ring(1000);
  std::vector<float> a(1000, 1.0f), b(500, 2.0f), c(300, 3.0f);
  ring.write(a.data(), a.size());  // fills the ring
  ring.write(b.data(), b.size());  // all lost, after sample 1000
  std::vector<float> out(2000);
  ASSERT_EQ(ring.read(out.data(), 600), 600u);
  EXPECT_EQ(ring.take_loss(), 0);
  ring.write(c.data(), c.size());  // fits: the loss's record is complete
  EXPECT_EQ(ring.read(out.data(), out.size()), 400u) << "stops at the loss";
  for (std::size_t i = 0; i < 400; ++i) ASSERT_EQ(out[i], 1.0f);
  EXPECT_EQ(ring.take_loss(), 500);
  EXPECT_EQ(ring.take_loss(), 0);
  ASSERT_EQ(ring.read(out.data(), out.size()), 300u);
  for (std::size_t i = 0; i < 300; ++i) ASSERT_EQ(out[i], 3.0f);
  EXPECT_EQ(ring.lost(), 500);
}

}  // namespace
}  // namespace pitchwire::daemon
