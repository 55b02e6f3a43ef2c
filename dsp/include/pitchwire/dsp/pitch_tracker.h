// pitch_tracker.h: the incremental F0 estimator and tracker (the heart of pitchwire).
//
// Thread contract: a PitchTracker is used by one thread at a time (the analysis thread in the daemon,
// the main thread in `pitchwire analyze`). It allocates everything in its constructor; process() and
// flush() allocate nothing of their own (libsamplerate keeps its own buffers) and never block.
//
// Pipeline per input block (any size, 1..8192 samples or more):
//   input -> [resample to the analysis rate, libsamplerate] -> DC/rumble high-pass -> mains hum canceller
//         -> low-pass (analysis band) -> per hop: YIN difference function through an FFT (KissFFT),
//            candidate periods with probabilities (a distribution over thresholds, as probabilistic YIN),
//            voicing evidence from the deepest dip through level gates and a speaker model
//         -> HMM over 25-cent pitch bins plus an unvoiced state, decoded by max-product (Viterbi): the best
//            path ending at the newest frame gives the live value at once (zero lag; for a clearly periodic
//            voice at or above 125 Hz already from a short window, 10 ms before the full one, and so are
//            brief transitions just before such a frame), the same path
//            traced back `settle_ms` gives the settled value (fixed-lag Viterbi), averaged with its
//            neighbours up to 20 ms away.
// Frames are the same whatever the block sizes (tested).
#pragma once

#include <cstdint>
#include <memory>
#include <optional>
#include <span>
#include <string>

namespace pitchwire::dsp {

struct TrackerConfig {
  double sample_rate_hz = 16000.0;  // input rate, 8000..96000
  double hop_ms = 5.0;              // frame step, 2.5..10
  double f0_min_hz = 50.0;          // lowest F0 searched
  double f0_max_hz = 1400.0;        // highest F0 searched
  double settle_ms = 60.0;          // lag of the settled (fixed-lag Viterbi) value, 0..500
  bool hum_cancel = true;           // cancel steady 50 and 60 Hz mains hum and its harmonics
  double level_floor_dbfs = -70.0;  // frames quieter than this are unvoiced

  // Empty when the configuration is usable; otherwise one line naming the field, value and range.
  [[nodiscard]] std::string validate() const;
};

// The value first published for a hop, available as soon as the hop's window is complete.
struct LiveFrame {
  std::int64_t index = 0;             // hop number from the start of the stream, 0-based
  double time_s = 0.0;                // centre of the analysis window on the input clock
  std::optional<float> f0_hz;         // empty when unvoiced
  float voicing = 0.0f;               // best voiced path score / (best voiced + best unvoiced), 0..1;
                                      // the live call is voiced when it exceeds 0.5
  float confidence = 0.0f;            // periodicity evidence for the reported F0 in this frame alone:
                                      // its candidate's probability, level-gated, 0..1; 0 when unvoiced
  float level_dbfs = -200.0f;         // RMS level of the input over one hop centred on time_s (AES17 dBFS)
};

// The settled value for a hop, `settle_ms` after its live value. Carries the live value for comparison.
struct SettledFrame {
  std::int64_t index = 0;
  double time_s = 0.0;
  std::optional<float> f0_hz;       // settled F0, empty when unvoiced
  std::optional<float> live_f0_hz;  // what the LiveFrame of the same index said
  float voicing = 0.0f;
  float confidence = 0.0f;
  float level_dbfs = -200.0f;
};

// Receives frames. Called synchronously from process()/flush() on the caller's thread.
class FrameSink {
 public:
  virtual ~FrameSink() = default;
  virtual void on_live(const LiveFrame& frame) = 0;
  virtual void on_settled(const SettledFrame& frame) = 0;
};

class PitchTracker {
 public:
  // Throws std::invalid_argument with config.validate()'s message when the configuration is not usable.
  explicit PitchTracker(const TrackerConfig& config);
  ~PitchTracker();
  PitchTracker(const PitchTracker&) = delete;
  PitchTracker& operator=(const PitchTracker&) = delete;

  // Feed the next block of mono samples (full scale = 1.0). Emits every frame whose window is complete.
  // Non-finite samples are treated as 0 and counted in nonfinite_samples().
  void process(std::span<const float> block, FrameSink& sink);

  // End of stream: pads with silence so that every hop whose centre lies within the input gets a
  // live and a settled frame, then settles everything still pending. The tracker may then be reset().
  void flush(FrameSink& sink);

  // Forget the stream; the next sample is time 0 again.
  void reset();

  [[nodiscard]] const TrackerConfig& config() const;
  [[nodiscard]] double analysis_rate_hz() const;     // rate the estimator runs at after resampling
  // Input time from a hop's centre to its live frame, at the latest: half the analysis window, plus the
  // resampler's hold-back for input above 8 kHz (2.4 ms, half its filter; docs/estimator.md). A clearly
  // periodic voice at or above 125 Hz gets its live frame 10 ms sooner (short window: docs/estimator.md,
  // "early live value").
  [[nodiscard]] double live_latency_s() const;
  [[nodiscard]] int settle_frames() const;           // settled lag in hops
  [[nodiscard]] std::int64_t nonfinite_samples() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace pitchwire::dsp
