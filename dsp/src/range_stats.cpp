// range_stats.cpp: see range_stats.h.
#include "pitchwire/dsp/range_stats.h"

#include <algorithm>
#include <cmath>

#include "pitchwire/dsp/units.h"

namespace pitchwire::dsp {

double percentile_sorted(std::span<const double> sorted, double p) {
  const double h = (static_cast<double>(sorted.size()) - 1.0) * std::clamp(p, 0.0, 1.0);
  const auto lo = static_cast<std::size_t>(std::floor(h));
  const std::size_t hi = std::min(lo + 1, sorted.size() - 1);
  return sorted[lo] + (h - static_cast<double>(lo)) * (sorted[hi] - sorted[lo]);
}

std::optional<F0Range> f0_range(std::span<double> f0_hz) {
  if (f0_hz.empty()) return std::nullopt;
  std::sort(f0_hz.begin(), f0_hz.end());
  F0Range r;
  r.min_hz = f0_hz.front();
  r.max_hz = f0_hz.back();
  r.p5_hz = percentile_sorted(f0_hz, 0.05);
  r.median_hz = percentile_sorted(f0_hz, 0.5);
  r.p95_hz = percentile_sorted(f0_hz, 0.95);
  r.p5_p95_semitones = semitones(r.p95_hz, r.p5_hz);
  return r;
}

std::optional<double> f0_sd_semitones(std::span<const double> f0_hz) {
  if (f0_hz.size() < 2) return std::nullopt;
  // Semitones re the first value keep the numbers small; the SD does not depend on the reference.
  const double ref = f0_hz.front();
  double sum = 0.0, sum_sq = 0.0;
  for (const double f : f0_hz) {
    const double s = semitones(f, ref);
    sum += s;
    sum_sq += s * s;
  }
  const double n = static_cast<double>(f0_hz.size());
  const double mean = sum / n;
  return std::sqrt(std::max(0.0, sum_sq / n - mean * mean));
}

}  // namespace pitchwire::dsp
