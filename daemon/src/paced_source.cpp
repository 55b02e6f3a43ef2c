// paced_source.cpp: sources that stand in for a device by writing blocks into the ring at the pace of
// real time: the built-in demo voice (rendered once at start, looped) and a recording replayed from a
// file (read block by block, optionally looped).
//
// Thread contract: start()/stop() on the control thread. A pacing thread plays the part of a device's
// audio callback: it writes `buffer_frames` samples into the ring every buffer_frames / rate seconds,
// with absolute deadlines so that timing errors do not accumulate. Unlike a device callback it may read
// the file (a slow disk then looks like a device that delivers late, and the ring absorbs it). Problems
// found in mid-file (truncation, a NaN sample) are reported through SourceListener::on_device_lost from
// that thread, and the source then counts as finished.
#include <pthread.h>

#include <algorithm>
#include <chrono>
#include <span>
#include <thread>
#include <vector>

#include "pitchwire/audiofile/audio_file.h"
#include "pitchwire/daemon/audio_source.h"
#include "pitchwire/dsp/voice_synth.h"

namespace pitchwire::daemon {
namespace {

using Clock = std::chrono::steady_clock;

// The demo voice is rendered at this rate: the synthesizer's cost grows with the rate, and 16 kHz holds
// everything the estimator uses (it analyses at 8 kHz).
constexpr double kDemoRateHz = 16000.0;

class PacedSource : public AudioSource {
 public:
  explicit PacedSource(const SourceOptions& options) : options_(options) {}
  ~PacedSource() override { PacedSource::stop(); }

  void stop() noexcept override {
    stop_requested_.store(true);
    if (thread_.joinable()) thread_.join();
  }
  [[nodiscard]] double sample_rate_hz() const override { return rate_hz_; }
  [[nodiscard]] bool finished() const override { return finished_.load(); }

 protected:
  // Starts the pacing thread. next_block(out) fills the front of `out` (size buffer_frames) and returns
  // how many samples it wrote; 0 means the end.
  void start_pacing(SampleRing& ring, SourceListener& listener) {
    ring_ = &ring;
    listener_ = &listener;
    stop_requested_.store(false);
    finished_.store(false);
    block_.assign(std::max(1u, options_.buffer_frames), 0.0f);
    thread_ = std::thread([this] { run(); });
  }
  virtual std::size_t next_block(std::span<float> out) = 0;

  void report_problem(const std::string& reason) { listener_->on_device_lost(describe(), reason); }

  SourceOptions options_;
  double rate_hz_ = 0.0;

 private:
  void run() {
    pthread_setname_np(pthread_self(), "pw-audio");
    // Each block is due n / rate after the previous one: blocks may be shorter at the end of a file.
    auto deadline = Clock::now();
    while (!stop_requested_.load()) {
      const std::size_t n = next_block(block_);
      if (n == 0) {
        finished_.store(true);
        return;
      }
      ring_->write(block_.data(), n);
      deadline += std::chrono::duration_cast<Clock::duration>(
          std::chrono::duration<double>(static_cast<double>(n) / rate_hz_));
      std::this_thread::sleep_until(deadline);
    }
  }

  SampleRing* ring_ = nullptr;
  SourceListener* listener_ = nullptr;
  std::vector<float> block_;
  std::thread thread_;
  std::atomic<bool> stop_requested_{false};
  std::atomic<bool> finished_{false};
};

class DemoSource final : public PacedSource {
 public:
  using PacedSource::PacedSource;
  // The pacing thread reads voice_: stop it before voice_ goes (~PacedSource would be too late).
  ~DemoSource() override { stop(); }
  [[nodiscard]] std::string describe() const override { return "demo"; }
  [[nodiscard]] int channel() const override { return 1; }

  void start(SampleRing& ring, SourceListener& listener) override {
    if (voice_.samples.empty()) voice_ = dsp::render_demo_session(kDemoRateHz);
    rate_hz_ = voice_.sample_rate_hz;
    position_ = 0;
    start_pacing(ring, listener);
  }

 private:
  std::size_t next_block(std::span<float> out) override {
    // The demo always loops: a newcomer may watch it for as long as they like.
    const auto& s = voice_.samples;
    for (float& x : out) {
      x = s[position_];
      position_ = (position_ + 1) % s.size();
    }
    return out.size();
  }

  dsp::Rendered voice_;
  std::size_t position_ = 0;
};

class FileSource final : public PacedSource {
 public:
  FileSource(std::string path, const SourceOptions& options) : PacedSource(options), path_(std::move(path)) {}
  // The pacing thread reads reader_: stop it before reader_ goes (~PacedSource would be too late).
  ~FileSource() override { stop(); }
  [[nodiscard]] std::string describe() const override { return "file:" + path_; }
  [[nodiscard]] int channel() const override { return options_.channel; }

  void start(SampleRing& ring, SourceListener& listener) override {
    reader_ = open();
    rate_hz_ = reader_->info().sample_rate_hz;
    start_pacing(ring, listener);
  }

 private:
  std::unique_ptr<audiofile::AudioFileReader> open() const {
    audiofile::ReadOptions read_options;
    if (options_.channel > 0) read_options.channel = options_.channel;
    read_options.block_frames = std::max(1u, options_.buffer_frames);
    try {
      return std::make_unique<audiofile::AudioFileReader>(path_, read_options);
    } catch (const audiofile::AudioFileError& e) {
      throw SourceError(describe() + ": " + e.what());
    }
  }

  std::size_t next_block(std::span<float> out) override {
    try {
      std::span<const float> got = reader_->read_block();  // at most buffer_frames == out.size()
      if (got.empty() && options_.loop && reader_->frames_read() > 0) {
        reader_ = open();  // from the start again
        got = reader_->read_block();
      }
      std::copy(got.begin(), got.end(), out.begin());
      return got.size();
    } catch (const std::exception& e) {
      report_problem(e.what());
      return 0;
    }
  }

  std::string path_;
  std::unique_ptr<audiofile::AudioFileReader> reader_;
};

}  // namespace

std::unique_ptr<AudioSource> make_demo_source(const SourceOptions& options) {
  return std::make_unique<DemoSource>(options);
}

std::unique_ptr<AudioSource> make_file_source(const std::string& path, const SourceOptions& options) {
  return std::make_unique<FileSource>(path, options);
}

}  // namespace pitchwire::daemon
