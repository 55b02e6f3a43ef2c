// contour_smoother.h: optional perceptual smoothing of a settled F0 contour, off by default.
//
// Brief F0 dips and bumps next to consonants (microprosody) last a few tens of milliseconds and are not
// heard as part of the melody. This stage removes them with a running median in the semitone domain,
// taken only within one voiced stretch (it never reaches across an unvoiced gap). Optionally, and only
// when asked, unvoiced gaps up to `bridge_max_ms` long are bridged by a straight line in semitones
// between the voiced values on either side; bridged frames are marked as such.
//
// Thread contract: one thread at a time (the analysis thread). Allocates in the constructor only.
#pragma once

#include <cstdint>
#include <optional>
#include <vector>

#include "pitchwire/dsp/pitch_tracker.h"

namespace pitchwire::dsp {

struct SmootherConfig {
  double hop_ms = 5.0;
  double median_ms = 55.0;    // running median span; dips shorter than about half of it are removed
  double bridge_max_ms = 0.0; // 0 = never bridge gaps
  [[nodiscard]] std::string validate() const;
};

struct SmoothedFrame {
  std::int64_t index = 0;
  double time_s = 0.0;
  std::optional<float> f0_hz;  // smoothed value (or bridged value), empty when unvoiced and not bridged
  bool bridged = false;        // true when f0_hz fills an unvoiced gap
};

class ContourSmoother {
 public:
  explicit ContourSmoother(const SmootherConfig& config);

  // Feed settled frames in index order; returns how many smoothed frames were written to `out`
  // (at most one per call; the stage runs delay_frames() behind its input).
  std::size_t push(const SettledFrame& frame, SmoothedFrame* out);
  // End of stream: writes every frame still held (up to delay_frames() of them) and resets.
  std::size_t flush(std::vector<SmoothedFrame>& out);
  [[nodiscard]] int delay_frames() const { return delay_; }

 private:
  [[nodiscard]] SmoothedFrame finish(std::int64_t index) const;
  struct Held {
    std::int64_t index = -1;
    double time_s = 0;
    std::optional<float> st;  // F0 in semitones re 100 Hz
  };
  [[nodiscard]] const Held& at(std::int64_t index) const;

  SmootherConfig cfg_;
  int half_ = 0, bridge_ = 0, delay_ = 0;
  std::vector<Held> ring_;
  std::int64_t next_in_ = 0, next_out_ = 0;
  mutable std::vector<float> scratch_;
};

}  // namespace pitchwire::dsp
