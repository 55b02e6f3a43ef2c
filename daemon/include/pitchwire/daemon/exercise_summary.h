// exercise_summary.h: the measures of one exercise, from its settled frames (docs/measures.md, "Exercise
// summary").
//
// Thread contract: plain values; the server feeds it from the analysis thread and reads it at the end of
// the exercise on the network thread, under a mutex of its own.
#pragma once

#include <cstdint>
#include <map>
#include <optional>
#include <string>
#include <vector>

#include "pitchwire/protocol/messages.h"

namespace pitchwire::daemon {

class ExerciseSummary {
 public:
  explicit ExerciseSummary(double hop_s) : hop_s_(hop_s) {}

  // One settled frame, with the bands active at that moment.
  void add(std::optional<float> f0_hz, const std::vector<protocol::Band>& bands);

  // The summary: duration_s (given: the exercise's time on the audio clock), settled_s, voiced_s,
  // voiced_fraction, cycle_dose, f0_min_hz, f0_p5_hz, f0_p50_hz, f0_p95_hz, f0_max_hz, the same in semitones
  // re reference_hz (f0_min_st ... f0_max_st, 12 log2(f / reference_hz)) with reference_hz, f0_range_st,
  // f0_sd_st, and per band (every band active during the exercise, in the order first seen) its
  // inside_fraction; measures: the preset's list, copied.
  [[nodiscard]] protocol::Json to_json(double duration_s, const std::vector<std::string>& measures,
                                       double reference_hz = 100.0) const;

 private:
  double hop_s_;
  std::int64_t frames_ = 0;
  std::vector<double> f0s_;  // voiced settled F0 (Hz), for exact percentiles and SD (dsp::f0_range)
  double cycles_ = 0.0;      // sum of F0 x hop over voiced frames
  struct BandCount {
    std::int64_t voiced = 0, inside = 0;
  };
  std::vector<std::string> band_order_;
  std::map<std::string, BandCount> bands_;
};

}  // namespace pitchwire::daemon
