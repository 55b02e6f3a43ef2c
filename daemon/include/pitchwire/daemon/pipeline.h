// pipeline.h: the analysis thread. It drains the sample ring, runs the pitch tracker (the same
// dsp::PitchTracker that `pitchwire analyze` runs), keeps the sliding-window statistics and hands every
// frame, statistic and audio event to a listener (the server's publisher). It also follows the voice
// against the target bands (dsp::BandTracker on live frames, band_crossing events; time inside each band
// on settled frames, in the statistics).
//
// Thread contract: start()/stop() on the control thread. The listener is called on the analysis thread
// only, synchronously and in order; it must not block (the server's publisher encodes and posts).
// audio_time_s(), the counters and set_bands() may be used from any thread.
#pragma once

#include <atomic>
#include <cstdint>
#include <memory>
#include <mutex>
#include <optional>
#include <span>
#include <thread>
#include <vector>

#include "pitchwire/daemon/audio_source.h"
#include "pitchwire/dsp/pitch_tracker.h"
#include "pitchwire/protocol/messages.h"

namespace pitchwire::daemon {

class PipelineListener {
 public:
  virtual ~PipelineListener() = default;
  virtual void on_live(const dsp::LiveFrame& frame) = 0;
  virtual void on_settled(const dsp::SettledFrame& frame) = 0;
  virtual void on_stats(const protocol::Stats& stats) = 0;
  virtual void on_event(const protocol::Event& event) = 0;  // overflow, band_crossing, dose_limit
  // The input as analysed, in order (lost input as the silence analysed in its place), for a recording.
  // Called before the frames the samples complete. The default ignores it.
  virtual void on_audio(std::span<const float> samples) { (void)samples; }
  virtual void on_end() = 0;  // the source has finished and every frame has been delivered
};

struct PipelineOptions {
  dsp::TrackerConfig tracker;     // sample_rate_hz is taken from the source at start()
  double stats_interval_s = 0.5;  // a `stats` every this many seconds of audio
  double stats_window_s = 5.0;    // over the settled frames of this many seconds
  double band_dwell_s = 0.25;     // band state hysteresis (dsp::BandTracker)
  double stability_window_s = 2.0;  // the F0 SD over the settled frames of this many seconds
  double reference_hz = 100.0;      // semitone values in stats are 12 log2(f / reference_hz)
  std::optional<double> spl_offset_db;        // dB SPL = dBFS + offset; empty: levels in dBFS only
  std::optional<double> dose_limit_voiced_s;  // a dose_limit event when the run's voiced time passes it
  std::optional<double> dose_limit_cycles;    // and when its cycle dose does
};

// Bands handed over from another thread: the analysis thread copies them when the version moves.
struct BandSlot {
  std::mutex mutex;
  std::vector<protocol::Band> bands;
  std::atomic<std::uint64_t> version{0};
};

class Pipeline {
 public:
  Pipeline(SampleRing& ring, const AudioSource& source, const PipelineOptions& options, PipelineListener& listener);
  ~Pipeline();
  Pipeline(const Pipeline&) = delete;
  Pipeline& operator=(const Pipeline&) = delete;

  // Builds the tracker for the source's rate (throws std::invalid_argument naming a bad setting) and
  // starts the analysis thread. Call after the source has started.
  void start();
  // Stops the analysis thread (within a few ms). Safe to call twice.
  void stop() noexcept;

  // Seconds of input analysed so far on the audio clock (samples lost in an overflow included: they are
  // analysed as silence, so that the audio clock stays the capture clock).
  [[nodiscard]] double audio_time_s() const;
  [[nodiscard]] std::int64_t frames_published() const { return frames_.load(std::memory_order_relaxed); }
  [[nodiscard]] const dsp::TrackerConfig& tracker_config() const { return options_.tracker; }

  // The target bands from now on (limits in Hz, checked by the caller). The analysis thread picks them up
  // at its next frame; a band kept with the same name and limits keeps its state.
  void set_bands(std::vector<protocol::Band> bands);
  // The reference pitch of the semitone values in stats from the next stats on. Any thread.
  void set_reference(double reference_hz) { reference_hz_.store(reference_hz, std::memory_order_relaxed); }

 private:
  void run();

  SampleRing& ring_;
  const AudioSource& source_;
  PipelineOptions options_;
  PipelineListener& listener_;
  std::unique_ptr<dsp::PitchTracker> tracker_;
  std::thread thread_;
  std::atomic<bool> stop_requested_{false};
  std::atomic<std::int64_t> samples_{0};
  std::atomic<std::int64_t> frames_{0};
  BandSlot bands_;
  std::atomic<double> reference_hz_{100.0};
};

}  // namespace pitchwire::daemon
