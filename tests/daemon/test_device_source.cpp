// test_device_source.cpp: the RtAudio device source against a JACK server of the test's own (the dummy
// driver: no sound hardware), with JACK player processes playing steady vowels of known F0.
//
// The player "pitchwire-test-player" has three output ports: out_1 a vowel at 220 Hz, out_2 one at 330 Hz
// and out_3 the 220 Hz vowel inverted, so that the mean of the three channels is the 330 Hz vowel over 3.
// "pitchwire-test-second" (one port) makes the fragment "pitchwire-test" ambiguous. The players run in
// processes of their own (this program started again: see jack_fixture.h).
//
// The suite points HOME at a folder of its own whose ~/.jackdrc would run a script leaving a mark: libjack
// runs it whenever a client would start a server, so the mark's absence shows that nothing did.
//
// Thread contract: tests run on the main thread; listener callbacks arrive on the source's monitor thread
// and are handed over under a mutex.
#include <gtest/gtest.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <functional>
#include <memory>
#include <mutex>
#include <optional>
#include <span>
#include <string>
#include <thread>
#include <vector>

#include "jack_fixture.h"
#include "jack_voice.h"
#include "pitchwire/daemon/audio_source.h"
#include "pitchwire/dsp/pitch_tracker.h"

namespace pw = pitchwire;
using namespace std::chrono_literals;
using Clock = std::chrono::steady_clock;

// When this program is started as a JACK player process, it plays here and exits before any test runs.
[[maybe_unused]] const int g_jack_player = pw::test::run_jack_player_if_asked();

namespace {

constexpr unsigned kJackRate = 48000;
constexpr unsigned kJackPeriod = 256;
constexpr double kF0Low = 220.0;
constexpr double kF0High = 330.0;
const std::string kPlayer = "pitchwire-test-player";
const std::string kSecond = "pitchwire-test-second";

class RecordingListener final : public pw::daemon::SourceListener {
 public:
  void on_device_lost(const std::string& device, const std::string& reason) override {
    const std::lock_guard lock(mutex_);
    lost_.push_back({device, reason, Clock::now()});
    changed_.notify_all();
  }
  void on_device_back(const std::string& device) override {
    const std::lock_guard lock(mutex_);
    back_.push_back({device, {}, Clock::now()});
    changed_.notify_all();
  }

  struct Event {
    std::string device;
    std::string reason;
    Clock::time_point when;
  };
  // The count-th loss (1-based), once it happened within the timeout.
  std::optional<Event> wait_lost(std::size_t count, Clock::duration timeout) { return wait(lost_, count, timeout); }
  std::optional<Event> wait_back(std::size_t count, Clock::duration timeout) { return wait(back_, count, timeout); }
  std::size_t back_count() {
    const std::lock_guard lock(mutex_);
    return back_.size();
  }

 private:
  std::optional<Event> wait(const std::vector<Event>& events, std::size_t count, Clock::duration timeout) {
    std::unique_lock lock(mutex_);
    if (!changed_.wait_for(lock, timeout, [&] { return events.size() >= count; })) return std::nullopt;
    return events[count - 1];
  }

  std::mutex mutex_;
  std::condition_variable changed_;
  std::vector<Event> lost_;
  std::vector<Event> back_;
};

// Samples the source has delivered, kept or not (a full ring drops them, which is no concern here).
std::int64_t delivered(const pw::daemon::SampleRing& ring) { return ring.written() + ring.lost(); }

// Waits until the source has delivered `count` more samples than `from`, emptying the ring meanwhile.
bool wait_for_samples(pw::daemon::SampleRing& ring, std::int64_t from, std::int64_t count, Clock::duration timeout) {
  std::vector<float> sink(8192);
  const auto deadline = Clock::now() + timeout;
  while (Clock::now() < deadline) {
    while (ring.read(sink.data(), sink.size()) > 0) {
    }
    if (delivered(ring) - from >= count) return true;
    std::this_thread::sleep_for(5ms);
  }
  return false;
}

// Reads `count` samples from the ring as they arrive (fewer if the timeout passes first).
std::vector<float> capture(pw::daemon::SampleRing& ring, std::size_t count, Clock::duration timeout) {
  std::vector<float> out;
  out.reserve(count);
  std::vector<float> block(4096);
  const auto deadline = Clock::now() + timeout;
  while (out.size() < count && Clock::now() < deadline) {
    const std::size_t n = ring.read(block.data(), std::min(block.size(), count - out.size()));
    if (n == 0) {
      std::this_thread::sleep_for(5ms);
      continue;
    }
    out.insert(out.end(), block.begin(), block.begin() + static_cast<std::ptrdiff_t>(n));
  }
  return out;
}

void discard_waiting(pw::daemon::SampleRing& ring) {
  std::vector<float> sink(8192);
  while (ring.read(sink.data(), sink.size()) > 0) {
  }
}

// The median of the settled F0 of the voiced frames, or nothing when fewer than 50 frames are voiced.
std::optional<double> median_voiced_f0(std::span<const float> samples, double rate_hz) {
  struct Sink final : pw::dsp::FrameSink {
    std::vector<float> f0s;
    void on_live(const pw::dsp::LiveFrame&) override {}
    void on_settled(const pw::dsp::SettledFrame& frame) override {
      if (frame.f0_hz) f0s.push_back(*frame.f0_hz);
    }
  } sink;
  pw::dsp::TrackerConfig config;
  config.sample_rate_hz = rate_hz;
  pw::dsp::PitchTracker tracker(config);
  tracker.process(samples, sink);
  tracker.flush(sink);
  if (sink.f0s.size() < 50) return std::nullopt;
  const auto middle = sink.f0s.begin() + static_cast<std::ptrdiff_t>(sink.f0s.size() / 2);
  std::nth_element(sink.f0s.begin(), middle, sink.f0s.end());
  return *middle;
}

double rms(std::span<const float> samples) {
  double sum = 0.0;
  for (const float s : samples) sum += static_cast<double>(s) * s;
  return samples.empty() ? 0.0 : std::sqrt(sum / static_cast<double>(samples.size()));
}

// Captures `seconds` after skipping the first `skip_s` (the ports are connected just after the stream
// starts, so a capture opens with a few periods of silence).
std::vector<float> capture_after(pw::daemon::SampleRing& ring, double rate_hz, double skip_s, double seconds) {
  const auto skip = static_cast<std::size_t>(skip_s * rate_hz);
  const auto count = static_cast<std::size_t>(seconds * rate_hz);
  std::vector<float> all = capture(ring, skip + count, 20s);
  if (all.size() <= skip) return {};
  return {all.begin() + static_cast<std::ptrdiff_t>(skip), all.end()};
}

std::string thrown_message(const std::function<void()>& action) {
  try {
    action();
  } catch (const pw::daemon::SourceError& e) {
    return e.what();
  }
  return "(no SourceError)";
}

class DeviceSourceTest : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    lock_ = std::make_unique<pw::test::JackTestLock>();
    if (!lock_->ok()) suite_problem_ = "another test process held the JACK test lock for 5 minutes";
    server_name_ = pw::test::use_private_jack_server();
    namespace fs = std::filesystem;
    home_ = fs::temp_directory_path() / ("pitchwire-test-home-" + std::to_string(::getpid()));
    fs::create_directories(home_);
    marker_ = home_ / "a-jack-server-was-started";
    const fs::path script = home_ / "start-jackd.sh";
    std::ofstream(script) << "#!/bin/sh\necho \"$@\" > '" << marker_.string() << "'\nexit 1\n";
    fs::permissions(script, fs::perms::owner_all);
    std::ofstream(home_ / ".jackdrc") << script.string() << " -d dummy\n";
    if (const char* home = std::getenv("HOME")) old_home_ = home;
    ::setenv("HOME", home_.c_str(), 1);

    const std::vector<float> low = pw::test::steady_vowel_loop(kF0Low, kJackRate);
    const std::vector<float> high = pw::test::steady_vowel_loop(kF0High, kJackRate);
    std::vector<float> low_inverted = low;
    for (float& s : low_inverted) s = -s;
    high_rms_ = rms(high);
    const std::string low_file = (home_ / "low.f32").string();
    const std::string high_file = (home_ / "high.f32").string();
    const std::string inverted_file = (home_ / "low-inverted.f32").string();
    if (!pw::test::write_samples(low_file, low) || !pw::test::write_samples(high_file, high) ||
        !pw::test::write_samples(inverted_file, low_inverted)) {
      suite_problem_ = "cannot write the players' signals to " + home_.string();
    }
    player_ = std::make_unique<pw::test::JackPlayerProcess>(
        kPlayer, std::vector<std::string>{low_file, high_file, inverted_file}, home_.string());
    second_ = std::make_unique<pw::test::JackPlayerProcess>(kSecond, std::vector<std::string>{low_file}, home_.string());
    server_ = std::make_unique<pw::test::JackServer>(kJackRate, kJackPeriod, (home_ / "jackd.log").string());
  }

  static void TearDownTestSuite() {
    player_.reset();
    second_.reset();
    // jackd keeps its name registered when it is stopped while clients are attached, as the last test
    // does (see jack_fixture.h): starting it again under the same name and stopping it without clients
    // releases the entry.
    if (!server_->started()) (void)server_->start();
    server_.reset();
    pw::test::remove_jack_leftovers(server_name_);
    lock_.reset();
    if (old_home_) {
      ::setenv("HOME", old_home_->c_str(), 1);
    } else {
      ::unsetenv("HOME");
    }
    std::error_code ignored;
    std::filesystem::remove_all(home_, ignored);
  }

  // Every test starts with the server and both players running (a test may have stopped them).
  void SetUp() override {
    ASSERT_TRUE(suite_problem_.empty()) << suite_problem_;
    if (!server_->started()) {
      const std::string problem = server_->start();
      ASSERT_TRUE(problem.empty()) << problem;
    }
    for (pw::test::JackPlayerProcess* player : {player_.get(), second_.get()}) {
      if (player->running()) continue;
      const std::string problem = player->start();
      ASSERT_TRUE(problem.empty()) << problem;
    }
  }

  static std::string server_log() { return server_->log_tail(); }

  // The server goes away; the players end with it.
  static void stop_server() {
    server_->stop();
    player_->stop();
    second_->stop();
  }

  static inline std::unique_ptr<pw::test::JackTestLock> lock_;
  static inline std::string server_name_;
  static inline std::string suite_problem_;
  static inline std::filesystem::path home_;
  static inline std::filesystem::path marker_;
  static inline std::optional<std::string> old_home_;
  static inline double high_rms_ = 0.0;
  static inline std::unique_ptr<pw::test::JackServer> server_;
  static inline std::unique_ptr<pw::test::JackPlayerProcess> player_;
  static inline std::unique_ptr<pw::test::JackPlayerProcess> second_;
};

TEST_F(DeviceSourceTest, CapturesTheChosenChannelOrTheMeanOfAllChannels) {
  pw::daemon::SourceOptions options;
  options.sample_rate_hz = 44100.0;  // the JACK server runs at 48 kHz: the source takes that, the nearest
  std::vector<std::unique_ptr<pw::daemon::AudioSource>> sources;
  for (const int channel : {1, 2, 0}) {
    options.channel = channel;
    sources.push_back(pw::daemon::make_device_source(kPlayer, options));
  }
  for (const auto& source : sources) {
    EXPECT_EQ(source->describe(), "device:jack/" + kPlayer);
    EXPECT_EQ(source->sample_rate_hz(), static_cast<double>(kJackRate));
  }

  std::vector<std::unique_ptr<pw::daemon::SampleRing>> rings;
  RecordingListener listener;
  for (const auto& source : sources) {
    rings.push_back(std::make_unique<pw::daemon::SampleRing>(4 * kJackRate));
    source->start(*rings.back(), listener);
  }
  struct Expected {
    int channel;
    double f0_hz;
  };
  const std::vector<Expected> expected = {{1, kF0Low}, {2, kF0High}, {0, kF0High}};
  for (std::size_t i = 0; i < sources.size(); ++i) {
    SCOPED_TRACE("channel " + std::to_string(expected[i].channel));
    EXPECT_EQ(sources[i]->channel(), expected[i].channel);
    EXPECT_EQ(sources[i]->sample_rate_hz(), static_cast<double>(kJackRate));
    const std::vector<float> samples = capture_after(*rings[i], kJackRate, 0.25, 1.25);
    ASSERT_EQ(samples.size(), static_cast<std::size_t>(1.25 * kJackRate)) << "too few samples within 20 s";
    const std::optional<double> f0 = median_voiced_f0(samples, kJackRate);
    ASSERT_TRUE(f0.has_value()) << "fewer than 50 voiced frames";
    const double cents = 1200.0 * std::log2(*f0 / expected[i].f0_hz);  // 1200*log2 ratio, cents (common practice)
    EXPECT_LT(std::abs(cents), 50.0) << "median F0 " << *f0 << " Hz";
    if (expected[i].channel == 0) {
      // (220 Hz vowel + 330 Hz vowel - the same 220 Hz vowel) / 3: the 330 Hz vowel at a third (by construction).
      EXPECT_NEAR(rms(samples) / (high_rms_ / 3.0), 1.0, 0.05);
    }
  }
  for (const auto& source : sources) {
    source->stop();
    EXPECT_GE(source->xruns(), 0);
  }
  EXPECT_FALSE(listener.wait_lost(1, 0ms).has_value());
}

TEST_F(DeviceSourceTest, FindsADeviceByItsNameOrAUniqueFragmentOrTheDefault) {
  const pw::daemon::SourceOptions options;
  EXPECT_EQ(pw::daemon::make_device_source(kPlayer, options)->describe(), "device:jack/" + kPlayer);
  EXPECT_EQ(pw::daemon::make_device_source("Test-PLAYER", options)->describe(), "device:jack/" + kPlayer);
  EXPECT_EQ(pw::daemon::make_device_source("jack/" + kSecond, options)->describe(), "device:jack/" + kSecond);
  // JACK comes first while a server runs; its first device is the dummy driver's "system".
  EXPECT_EQ(pw::daemon::make_device_source("", options)->describe(), "device:jack/system");
  EXPECT_EQ(pw::daemon::make_device_source("jack/", options)->describe(), "device:jack/system");
}

TEST_F(DeviceSourceTest, AnUnknownOrAmbiguousNameIsAnErrorListingTheDevices) {
  const pw::daemon::SourceOptions options;
  const std::string unknown = thrown_message([&] { pw::daemon::make_device_source("no-such-device-7f3a", options); });
  EXPECT_NE(unknown.find("device:no-such-device-7f3a: "), std::string::npos) << unknown;
  EXPECT_NE(unknown.find("jack/" + kPlayer + " (3 ch)"), std::string::npos) << unknown;
  EXPECT_NE(unknown.find("jack/" + kSecond + " (1 ch)"), std::string::npos) << unknown;
  EXPECT_NE(unknown.find("jack/system (2 ch)"), std::string::npos) << unknown;
  EXPECT_EQ(unknown.find('\n'), std::string::npos) << unknown;

  const std::string ambiguous = thrown_message([&] { pw::daemon::make_device_source("PITCHWIRE-test", options); });
  EXPECT_NE(ambiguous.find("ambiguous"), std::string::npos) << ambiguous;
  EXPECT_NE(ambiguous.find("jack/" + kPlayer + ", jack/" + kSecond), std::string::npos) << ambiguous;
  EXPECT_EQ(ambiguous.find('\n'), std::string::npos) << ambiguous;

  pw::daemon::SourceOptions fourth;
  fourth.channel = 4;
  const std::string channel = thrown_message([&] { pw::daemon::make_device_source(kPlayer, fourth); });
  EXPECT_NE(channel.find("channel 4"), std::string::npos) << channel;
  EXPECT_NE(channel.find("3 input channel"), std::string::npos) << channel;
}

TEST_F(DeviceSourceTest, ListsTheJackClientsAsInputDevices) {
  const std::vector<std::string> lines = pw::daemon::list_input_devices();
  const auto has = [&](const std::string& line) { return std::find(lines.begin(), lines.end(), line) != lines.end(); };
  std::string all;
  for (const std::string& line : lines) all += line + "\n";
  EXPECT_TRUE(has("jack/" + kPlayer + " (3 ch, default rate 48000 Hz)")) << all;
  EXPECT_TRUE(has("jack/" + kSecond + " (1 ch, default rate 48000 Hz)")) << all;
  EXPECT_TRUE(has("jack/system (2 ch, default rate 48000 Hz), default")) << all;
}

TEST_F(DeviceSourceTest, TellsWhenJackGoesAwayAndComesBackAndStopsPromptlyMeanwhile) {
  pw::daemon::SourceOptions options;
  options.channel = 1;
  const auto source = pw::daemon::make_device_source(kPlayer, options);
  pw::daemon::SampleRing ring(4 * kJackRate);
  RecordingListener listener;
  source->start(ring, listener);
  ASSERT_TRUE(wait_for_samples(ring, 0, kJackRate / 5, 10s)) << "no samples within 10 s";

  // The server goes away: the source says so.
  const auto killed = Clock::now();
  stop_server();
  const auto lost = listener.wait_lost(1, 10s);
  ASSERT_TRUE(lost.has_value()) << "on_device_lost not called within 10 s";
  EXPECT_EQ(lost->device, "device:jack/" + kPlayer);
  EXPECT_FALSE(lost->reason.empty());
  EXPECT_LT(lost->when - killed, 5s);

  // While it retries (at 0.25 s and 0.75 s after the loss), and while devices are looked for, no JACK
  // server gets started.
  while (Clock::now() - lost->when < 1s) std::this_thread::sleep_for(20ms);
  for (const std::string& line : pw::daemon::list_input_devices()) EXPECT_NE(line.rfind("jack/", 0), 0u) << line;
  EXPECT_EQ(thrown_message([&] { pw::daemon::make_device_source("jack/", {}); }),
            "no audio input device found (tried: jack); use --input demo to run on the built-in demo voice");
  EXPECT_FALSE(std::filesystem::exists(marker_)) << "a JACK server start was attempted";
  EXPECT_FALSE(pw::test::jack_server_answers());
  EXPECT_EQ(listener.back_count(), 0u);

  // The server and the player return: the source finds the device again and its samples flow again.
  {
    const std::string problem = server_->start();
    ASSERT_TRUE(problem.empty()) << problem;
    const std::string player_problem = player_->start();
    ASSERT_TRUE(player_problem.empty()) << player_problem;
  }
  const auto back = listener.wait_back(1, 15s);
  ASSERT_TRUE(back.has_value()) << "on_device_back not called within 15 s; jackd log: " << server_log();
  EXPECT_EQ(back->device, "device:jack/" + kPlayer);
  discard_waiting(ring);
  const std::vector<float> samples = capture_after(ring, kJackRate, 0.25, 1.0);
  ASSERT_EQ(samples.size(), static_cast<std::size_t>(kJackRate)) << "too few samples within 20 s after coming back";
  const std::optional<double> f0 = median_voiced_f0(samples, kJackRate);
  ASSERT_TRUE(f0.has_value()) << "fewer than 50 voiced frames after coming back";
  const double cents = 1200.0 * std::log2(*f0 / kF0Low);  // 1200*log2 ratio, cents (common practice)
  EXPECT_LT(std::abs(cents), 50.0) << "median F0 " << *f0 << " Hz";

  // Away again; stop() during the backoff returns promptly (the goal is 0.3 s; the bound allows for a
  // loaded machine).
  stop_server();
  const auto lost_again = listener.wait_lost(2, 10s);
  ASSERT_TRUE(lost_again.has_value()) << "second on_device_lost not called within 10 s";
  while (Clock::now() - lost_again->when < 400ms) std::this_thread::sleep_for(20ms);
  const auto stopping = Clock::now();
  source->stop();
  const auto stop_time = Clock::now() - stopping;
  EXPECT_LT(stop_time, 1s);
  std::cout << "stop() during backoff took "
            << std::chrono::duration<double, std::milli>(stop_time).count() << " ms\n";
  EXPECT_FALSE(std::filesystem::exists(marker_)) << "a JACK server start was attempted";
}

}  // namespace
