// pipeline.cpp: the analysis thread (see pipeline.h).
#include "pitchwire/daemon/pipeline.h"

#include <pthread.h>

#include <algorithm>
#include <chrono>
#include <cmath>

#include "pitchwire/dsp/range_stats.h"

namespace pitchwire::daemon {
namespace {

// Samples taken from the ring per tracker call: a few hops at most, so frames leave as soon as ready.
constexpr std::size_t kReadChunk = 512;
// How long the analysis thread sleeps when the ring is empty. The audio thread never signals (that
// would be a system call in the callback), so the analysis thread polls; 1 ms adds at most 1 ms latency
// (0.5 ms on average) against a 5 ms hop.
constexpr auto kPollInterval = std::chrono::milliseconds(1);

// Receives the tracker's frames on the analysis thread, keeps the statistics window and forwards.
class Forwarder final : public dsp::FrameSink {
 public:
  Forwarder(PipelineListener& listener, const PipelineOptions& options, std::atomic<std::int64_t>& frames)
      : listener_(listener), frames_(frames), options_(options) {
    const double hop_s = options.tracker.hop_ms / 1000.0;
    window_.assign(static_cast<std::size_t>(std::ceil(options.stats_window_s / hop_s)), std::nullopt);
    scratch_.reserve(window_.size());
    interval_frames_ = std::max<std::int64_t>(1, std::llround(options.stats_interval_s / hop_s));
  }

  void on_live(const dsp::LiveFrame& frame) override {
    listener_.on_live(frame);
    frames_.fetch_add(1, std::memory_order_relaxed);
  }

  void on_settled(const dsp::SettledFrame& frame) override {
    listener_.on_settled(frame);
    window_[next_] = frame.f0_hz;
    next_ = (next_ + 1) % window_.size();
    filled_ = std::min(filled_ + 1, window_.size());
    if ((frame.index + 1) % interval_frames_ == 0) listener_.on_stats(stats(frame.time_s));
  }

 private:
  // Statistics over the settled frames of the window (docs/measures.md): voiced share, percentiles
  // (dsp::f0_range, Hyndman & Fan definition 7) and the SD in semitones (dsp::f0_sd_semitones).
  protocol::Stats stats(double time_s) {
    scratch_.clear();
    for (std::size_t i = 0; i < filled_; ++i) {
      if (window_[i]) scratch_.push_back(*window_[i]);
    }
    protocol::Stats s;
    s.time_s = time_s;
    s.window_s = static_cast<double>(filled_) * options_.tracker.hop_ms / 1000.0;
    s.voiced_fraction = filled_ ? static_cast<double>(scratch_.size()) / static_cast<double>(filled_) : 0.0;
    // Rounded as frames are (3 decimals): the values come from single-precision F0.
    auto round3 = [](double x) { return std::round(x * 1000.0) / 1000.0; };
    if (const auto sd = dsp::f0_sd_semitones(scratch_)) s.f0_sd_st = round3(*sd);
    if (const auto range = dsp::f0_range(scratch_)) {  // sorts scratch_ (after the SD, which does not care)
      s.f0_p5_hz = round3(range->p5_hz);
      s.f0_p50_hz = round3(range->median_hz);
      s.f0_p95_hz = round3(range->p95_hz);
    }
    s.voiced_fraction = round3(s.voiced_fraction);
    return s;
  }

  PipelineListener& listener_;
  std::atomic<std::int64_t>& frames_;
  PipelineOptions options_;
  std::vector<std::optional<float>> window_;  // ring of the last settled F0 values
  std::size_t next_ = 0, filled_ = 0;
  std::vector<double> scratch_;
  std::int64_t interval_frames_ = 1;
};

}  // namespace

Pipeline::Pipeline(SampleRing& ring, const AudioSource& source, const PipelineOptions& options,
                   PipelineListener& listener)
    : ring_(ring), source_(source), options_(options), listener_(listener) {}

Pipeline::~Pipeline() { stop(); }

void Pipeline::start() {
  options_.tracker.sample_rate_hz = source_.sample_rate_hz();
  tracker_ = std::make_unique<dsp::PitchTracker>(options_.tracker);
  stop_requested_.store(false);
  thread_ = std::thread([this] { run(); });
}

void Pipeline::stop() noexcept {
  stop_requested_.store(true);
  if (thread_.joinable()) thread_.join();
}

double Pipeline::audio_time_s() const {
  return static_cast<double>(samples_.load(std::memory_order_relaxed)) / options_.tracker.sample_rate_hz;
}

void Pipeline::run() {
  pthread_setname_np(pthread_self(), "pw-analysis");
  Forwarder forwarder(listener_, options_, frames_);
  std::vector<float> chunk(kReadChunk);
  // Samples the ring could not take are analysed as silence where they were lost, so that frame times
  // stay on the capture clock; subscribers are told how many were lost.
  auto insert_silence = [&](std::int64_t missing) {
    listener_.on_event(protocol::overflow_event(audio_time_s(), missing));
    std::fill(chunk.begin(), chunk.end(), 0.0f);
    for (std::int64_t left = missing; left > 0;) {
      const auto k = static_cast<std::size_t>(std::min<std::int64_t>(left, static_cast<std::int64_t>(chunk.size())));
      tracker_->process(std::span<const float>(chunk.data(), k), forwarder);
      samples_.fetch_add(static_cast<std::int64_t>(k), std::memory_order_relaxed);
      left -= static_cast<std::int64_t>(k);
    }
  };
  std::int64_t xruns_seen = 0;
  while (!stop_requested_.load(std::memory_order_relaxed)) {
    const std::size_t n = ring_.read(chunk.data(), chunk.size());
    if (n > 0) {
      tracker_->process(std::span<const float>(chunk.data(), n), forwarder);
      samples_.fetch_add(static_cast<std::int64_t>(n), std::memory_order_relaxed);
    }
    // A loss at this point of the stream (read() stops there); losses before this thread started count.
    if (const std::int64_t missing = ring_.take_loss(); missing > 0) {
      insert_silence(missing);
      continue;
    }
    if (n > 0) continue;
    if (const std::int64_t xruns = source_.xruns(); xruns != xruns_seen) {
      xruns_seen = xruns;
      // The driver lost input before it reached us: the count of samples is unknown.
      listener_.on_event(protocol::overflow_event(audio_time_s(), 0));
    }
    if (source_.finished()) {
      tracker_->flush(forwarder);
      listener_.on_end();
      return;
    }
    std::this_thread::sleep_for(kPollInterval);
  }
}

}  // namespace pitchwire::daemon
