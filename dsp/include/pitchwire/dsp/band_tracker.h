// band_tracker.h: where the voice is against a target band, frame by frame, with hysteresis in time.
//
// A band is a pitch interval [low_hz, high_hz] set by the supervising clinician or coach. Each frame is
// below, inside or above it, or unvoiced (no F0). Read raw, a voice that wobbles at an edge, or a consonant
// that breaks voicing for a few frames, would flip the state many times a second; so the state that is
// reported (the held state) changes only once the frames have shown the new position without a break for
// at least `dwell_s` (docs/measures.md, "Band state"). The change is then dated to the first frame of that
// run: when the voice left, not when it was confirmed.
//
// Thread contract: plain values, used by one thread (the analysis thread in the daemon, or a report).
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <optional>
#include <string_view>
#include <vector>

namespace pitchwire::dsp {

enum class BandPosition : std::uint8_t { below, inside, above, unvoiced };

[[nodiscard]] std::string_view name(BandPosition p);

// Raw position of one frame: inside when low_hz <= f0 <= high_hz (limits inclusive), unvoiced when no F0.
[[nodiscard]] BandPosition band_position(std::optional<float> f0_hz, double low_hz, double high_hz);

struct BandChange {
  BandPosition from = BandPosition::unvoiced;
  BandPosition to = BandPosition::unvoiced;
  double since_s = 0.0;      // time of the first frame of the run that made the change
  double confirmed_s = 0.0;  // time of the frame at which the run reached the dwell
};

class BandTracker {
 public:
  // dwell_s >= 0 over frames hop_s apart (> 0); a dwell under one hop reports every raw change at once.
  // The held state starts as unvoiced. Throws std::invalid_argument naming a bad value.
  BandTracker(double dwell_s, double hop_s);

  // The next frame, in time order. Returns the change of the held state this frame confirmed, if any.
  std::optional<BandChange> update(double time_s, BandPosition raw);

  [[nodiscard]] BandPosition held() const { return held_; }
  [[nodiscard]] double dwell_s() const { return dwell_s_; }
  // Back to the start: held unvoiced, nothing seen.
  void reset();

 private:
  double dwell_s_;
  std::vector<BandPosition> window_;  // the last window_.size() raw positions, a ring
  std::size_t next_ = 0, filled_ = 0;
  std::array<std::size_t, 4> counts_{};
  BandPosition held_ = BandPosition::unvoiced;
  BandPosition run_ = BandPosition::unvoiced;  // position of the latest unbroken stretch
  double run_start_s_ = 0.0;
};

}  // namespace pitchwire::dsp
