// range_stats.h: the range of a set of voiced F0 values (percentiles in Hz and their width in semitones)
// and their stability (SD in semitones).
//
// Definitions (docs/measures.md): percentiles by linear interpolation between closest ranks, definition 7
// of Hyndman & Fan (1996), the default of R and NumPy; range width = 12 * log2(p95 / p5) semitones.
// Thread contract: pure functions, any thread.
#pragma once

#include <optional>
#include <span>

namespace pitchwire::dsp {

// The p-quantile (0 <= p <= 1) of values sorted in ascending order; the values must not be empty.
[[nodiscard]] double percentile_sorted(std::span<const double> sorted, double p);

struct F0Range {
  double min_hz = 0, p5_hz = 0, median_hz = 0, p95_hz = 0, max_hz = 0;
  double p5_p95_semitones = 0;  // 12 * log2(p95 / p5)
};

// The range of voiced F0 values (Hz, any order, all > 0); empty when there are none. Sorts `f0_hz`.
[[nodiscard]] std::optional<F0Range> f0_range(std::span<double> f0_hz);

// Stability: the standard deviation of F0 in semitones, sqrt(sum((s_i - mean)^2) / n) with
// s_i = 12 * log2(f_i / f_ref) (the population SD; the reference frequency cancels out). A sine vibrato of
// depth +-d semitones has SD d / sqrt(2). Empty when there are fewer than 2 values.
[[nodiscard]] std::optional<double> f0_sd_semitones(std::span<const double> f0_hz);

}  // namespace pitchwire::dsp
