// pipeline.cpp: the analysis thread (see pipeline.h).
#include "pitchwire/daemon/pipeline.h"

#include <pthread.h>

#include <algorithm>
#include <chrono>
#include <cmath>

#include "pitchwire/dsp/band_tracker.h"
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
protocol::BandPosition to_protocol(dsp::BandPosition p) {
  switch (p) {
    case dsp::BandPosition::below: return protocol::BandPosition::kBelow;
    case dsp::BandPosition::inside: return protocol::BandPosition::kInside;
    case dsp::BandPosition::above: return protocol::BandPosition::kAbove;
    case dsp::BandPosition::unvoiced: return protocol::BandPosition::kUnvoiced;
  }
  return protocol::BandPosition::kUnvoiced;
}

// A target band as the analysis thread follows it.
struct FollowedBand {
  protocol::Band band;
  dsp::BandTracker tracker;
};

class Forwarder final : public dsp::FrameSink {
 public:
  Forwarder(PipelineListener& listener, const PipelineOptions& options, std::atomic<std::int64_t>& frames,
            BandSlot& band_slot, const std::atomic<double>& reference_hz)
      : listener_(listener), frames_(frames), options_(options), band_slot_(band_slot), reference_hz_(reference_hz) {
    hop_s_ = options.tracker.hop_ms / 1000.0;
    stats_frames_ = static_cast<std::size_t>(std::ceil(options.stats_window_s / hop_s_ - 1e-9));
    stability_frames_ = static_cast<std::size_t>(std::ceil(options.stability_window_s / hop_s_ - 1e-9));
    window_.assign(std::max(stats_frames_, stability_frames_), std::nullopt);
    levels_.assign(window_.size(), -200.0f);
    scratch_.reserve(window_.size());
    interval_frames_ = std::max<std::int64_t>(1, std::llround(options.stats_interval_s / hop_s_));
  }

  void on_live(const dsp::LiveFrame& frame) override {
    listener_.on_live(frame);
    frames_.fetch_add(1, std::memory_order_relaxed);
    refresh_bands();
    for (FollowedBand& f : bands_) {
      const dsp::BandPosition raw = dsp::band_position(frame.f0_hz, f.band.low_hz, f.band.high_hz);
      if (const auto change = f.tracker.update(frame.time_s, raw)) {
        listener_.on_event(protocol::band_crossing_event(frame.time_s, f.band.name, to_protocol(change->from),
                                                         to_protocol(change->to), change->since_s));
      }
    }
  }

  void on_settled(const dsp::SettledFrame& frame) override {
    listener_.on_settled(frame);
    window_[next_] = frame.f0_hz;
    levels_[next_] = frame.level_dbfs;
    next_ = (next_ + 1) % window_.size();
    filled_ = std::min(filled_ + 1, window_.size());
    if (frame.f0_hz) {
      voiced_s_ += hop_s_;
      cycle_dose_ += static_cast<double>(*frame.f0_hz) * hop_s_;
      check_dose("voiced_s", options_.dose_limit_voiced_s, voiced_s_, voiced_limit_sent_, frame.time_s);
      check_dose("cycle_dose", options_.dose_limit_cycles, cycle_dose_, cycles_limit_sent_, frame.time_s);
    }
    if ((frame.index + 1) % interval_frames_ == 0) listener_.on_stats(stats(frame.time_s));
  }

 private:
  // Vocal dose limits (docs/measures.md, "Vocal dose"): one event per run and measure, when it is passed.
  void check_dose(std::string_view measure, const std::optional<double>& limit, double value, bool& sent,
                  double time_s) {
    if (sent || !limit || value < *limit) return;
    sent = true;
    listener_.on_event(protocol::dose_limit_event(time_s, measure, *limit, std::round(value * 1000.0) / 1000.0));
  }

  // Index in the ring of the k-th most recent frame (k = 0: the newest).
  [[nodiscard]] std::size_t recent(std::size_t k) const { return (next_ + window_.size() - 1 - k) % window_.size(); }

  // Statistics over the settled frames of the window (docs/measures.md): voiced share, percentiles
  // (dsp::f0_range, Hyndman & Fan definition 7), and the SD in semitones (dsp::f0_sd_semitones) over the
  // stability window; the session's vocal doses.
  protocol::Stats stats(double time_s) {
    const std::size_t n = std::min(filled_, stats_frames_);
    // Rounded as frames are (3 decimals): the values come from single-precision F0.
    auto round3 = [](double x) { return std::round(x * 1000.0) / 1000.0; };
    protocol::Stats s;
    scratch_.clear();
    for (std::size_t k = 0; k < std::min(filled_, stability_frames_); ++k) {
      if (const auto& f0 = window_[recent(k)]) scratch_.push_back(*f0);
    }
    if (const auto sd = dsp::f0_sd_semitones(scratch_)) s.f0_sd_st = round3(*sd);
    scratch_.clear();
    for (std::size_t k = 0; k < n; ++k) {
      if (const auto& f0 = window_[recent(k)]) scratch_.push_back(*f0);
    }
    s.time_s = time_s;
    s.window_s = static_cast<double>(n) * hop_s_;
    s.voiced_fraction = n ? static_cast<double>(scratch_.size()) / static_cast<double>(n) : 0.0;
    s.session_voiced_s = round3(voiced_s_);
    s.session_cycle_dose = std::round(cycle_dose_ * 10.0) / 10.0;
    if (const auto range = dsp::f0_range(scratch_)) {  // sorts scratch_
      s.f0_p5_hz = round3(range->p5_hz);
      s.f0_p50_hz = round3(range->median_hz);
      s.f0_p95_hz = round3(range->p95_hz);
      s.f0_min_hz = round3(scratch_.front());
      s.f0_max_hz = round3(scratch_.back());
      s.f0_range_st = round3(12.0 * std::log2(range->p95_hz / range->p5_hz));
      const double ref = reference_hz_.load(std::memory_order_relaxed);
      auto st = [&](double hz) { return round3(12.0 * std::log2(hz / ref)); };
      s.reference_hz = ref;
      s.f0_min_st = st(scratch_.front());
      s.f0_p5_st = st(range->p5_hz);
      s.f0_p50_st = st(range->median_hz);
      s.f0_p95_st = st(range->p95_hz);
      s.f0_max_st = st(scratch_.back());
    }
    // Level over the window: the mean of the frames' power (an equivalent level, common practice) and the
    // loudest frame, in dBFS (AES17: a full-scale sine is 0 dBFS); frames at the -200 dBFS floor are
    // digital silence and count as zero power.
    double power = 0.0;
    float loudest = -200.0f;
    for (std::size_t k = 0; k < n; ++k) {
      const float level = levels_[recent(k)];
      if (level > -200.0f) power += std::pow(10.0, static_cast<double>(level) / 10.0);
      loudest = std::max(loudest, level);
    }
    auto round2 = [](double x) { return std::round(100.0 * x) / 100.0; };
    if (n > 0 && power > 0.0) {
      s.level_mean_dbfs = round2(10.0 * std::log10(power / static_cast<double>(n)));
      s.level_max_dbfs = round2(static_cast<double>(loudest));
      // dB SPL only through the calibration offset the supervisor measured (docs/measures.md, "Level").
      if (options_.spl_offset_db) {
        s.level_mean_db_spl = round2(*s.level_mean_dbfs + *options_.spl_offset_db);
        s.level_max_db_spl = round2(*s.level_max_dbfs + *options_.spl_offset_db);
      }
    }
    s.voiced_fraction = round3(s.voiced_fraction);
    // Time inside each band: voiced frames of the window inside it, over voiced frames (docs/measures.md).
    for (const FollowedBand& f : bands_) {
      protocol::BandShare share;
      share.name = f.band.name;
      share.state = to_protocol(f.tracker.held());
      if (!scratch_.empty()) {
        const auto inside = std::count_if(scratch_.begin(), scratch_.end(), [&](double hz) {
          return dsp::band_position(static_cast<float>(hz), f.band.low_hz, f.band.high_hz) == dsp::BandPosition::inside;
        });
        share.inside_fraction = round3(static_cast<double>(inside) / static_cast<double>(scratch_.size()));
      }
      s.bands.push_back(std::move(share));
    }
    return s;
  }

  // Takes new bands from the slot when they have changed; a band kept with the same name and limits keeps
  // its tracker (and so its state).
  void refresh_bands() {
    const std::uint64_t version = band_slot_.version.load(std::memory_order_acquire);
    if (version == bands_version_) return;
    std::vector<protocol::Band> wanted;
    {
      const std::lock_guard<std::mutex> lock(band_slot_.mutex);
      wanted = band_slot_.bands;
      bands_version_ = band_slot_.version.load(std::memory_order_relaxed);
    }
    std::vector<FollowedBand> next;
    next.reserve(wanted.size());
    for (protocol::Band& b : wanted) {
      auto same = std::find_if(bands_.begin(), bands_.end(), [&](const FollowedBand& f) { return f.band == b; });
      if (same != bands_.end()) {
        next.push_back(std::move(*same));
      } else {
        next.push_back(FollowedBand{std::move(b), dsp::BandTracker(options_.band_dwell_s, options_.tracker.hop_ms / 1000.0)});
      }
    }
    bands_ = std::move(next);
  }

  PipelineListener& listener_;
  std::atomic<std::int64_t>& frames_;
  PipelineOptions options_;
  std::vector<std::optional<float>> window_;  // ring of the last settled F0 values
  std::vector<float> levels_;                 // and their levels (dBFS)
  std::size_t next_ = 0, filled_ = 0;
  std::size_t stats_frames_ = 1, stability_frames_ = 1;  // window lengths in frames (ring: the longer)
  double hop_s_ = 0.005;
  double voiced_s_ = 0.0, cycle_dose_ = 0.0;  // session doses
  bool voiced_limit_sent_ = false, cycles_limit_sent_ = false;
  std::vector<double> scratch_;
  std::int64_t interval_frames_ = 1;
  BandSlot& band_slot_;
  const std::atomic<double>& reference_hz_;
  std::uint64_t bands_version_ = 0;
  std::vector<FollowedBand> bands_;
};

}  // namespace

Pipeline::Pipeline(SampleRing& ring, const AudioSource& source, const PipelineOptions& options,
                   PipelineListener& listener)
    : ring_(ring), source_(source), options_(options), listener_(listener) {}

Pipeline::~Pipeline() { stop(); }

void Pipeline::start() {
  options_.tracker.sample_rate_hz = source_.sample_rate_hz();
  reference_hz_.store(options_.reference_hz);
  tracker_ = std::make_unique<dsp::PitchTracker>(options_.tracker);
  stop_requested_.store(false);
  thread_ = std::thread([this] { run(); });
}

void Pipeline::stop() noexcept {
  stop_requested_.store(true);
  if (thread_.joinable()) thread_.join();
}

void Pipeline::set_bands(std::vector<protocol::Band> bands) {
  const std::lock_guard<std::mutex> lock(bands_.mutex);
  bands_.bands = std::move(bands);
  bands_.version.fetch_add(1, std::memory_order_release);
}

double Pipeline::audio_time_s() const {
  return static_cast<double>(samples_.load(std::memory_order_relaxed)) / options_.tracker.sample_rate_hz;
}

void Pipeline::run() {
  pthread_setname_np(pthread_self(), "pw-analysis");
  Forwarder forwarder(listener_, options_, frames_, bands_, reference_hz_);
  std::vector<float> chunk(kReadChunk);
  // Samples the ring could not take are analysed as silence where they were lost, so that frame times
  // stay on the capture clock; subscribers are told how many were lost.
  auto insert_silence = [&](std::int64_t missing) {
    listener_.on_event(protocol::overflow_event(audio_time_s(), missing));
    std::fill(chunk.begin(), chunk.end(), 0.0f);
    for (std::int64_t left = missing; left > 0;) {
      const auto k = static_cast<std::size_t>(std::min<std::int64_t>(left, static_cast<std::int64_t>(chunk.size())));
      listener_.on_audio(std::span<const float>(chunk.data(), k));
      tracker_->process(std::span<const float>(chunk.data(), k), forwarder);
      samples_.fetch_add(static_cast<std::int64_t>(k), std::memory_order_relaxed);
      left -= static_cast<std::int64_t>(k);
    }
  };
  std::int64_t xruns_seen = 0;
  while (!stop_requested_.load(std::memory_order_relaxed)) {
    const std::size_t n = ring_.read(chunk.data(), chunk.size());
    if (n > 0) {
      listener_.on_audio(std::span<const float>(chunk.data(), n));
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
