// band_tracker.cpp: see band_tracker.h.
#include "pitchwire/dsp/band_tracker.h"

#include <algorithm>
#include <cmath>
#include <stdexcept>

namespace pitchwire::dsp {

std::string_view name(BandPosition p) {
  switch (p) {
    case BandPosition::below: return "below";
    case BandPosition::inside: return "inside";
    case BandPosition::above: return "above";
    case BandPosition::unvoiced: return "unvoiced";
  }
  return "unvoiced";
}

BandPosition band_position(std::optional<float> f0_hz, double low_hz, double high_hz) {
  if (!f0_hz || !std::isfinite(*f0_hz)) return BandPosition::unvoiced;
  const double f = *f0_hz;
  if (f < low_hz) return BandPosition::below;
  if (f > high_hz) return BandPosition::above;
  return BandPosition::inside;
}

BandTracker::BandTracker(double dwell_s, double hop_s) : dwell_s_(dwell_s) {
  if (!(dwell_s >= 0.0) || !std::isfinite(dwell_s)) throw std::invalid_argument("band dwell must be a number >= 0 s");
  if (!(hop_s > 0.0) || !std::isfinite(hop_s)) throw std::invalid_argument("band hop must be a number > 0 s");
  window_.assign(static_cast<std::size_t>(std::max(1L, std::lround(dwell_s / hop_s))), BandPosition::unvoiced);
}

void BandTracker::reset() {
  next_ = filled_ = 0;
  counts_ = {};
  held_ = BandPosition::unvoiced;
  run_ = BandPosition::unvoiced;
  run_start_s_ = 0.0;
}

std::optional<BandChange> BandTracker::update(double time_s, BandPosition raw) {
  if (filled_ == 0 || raw != run_) {
    run_ = raw;
    run_start_s_ = time_s;
  }
  if (filled_ == window_.size()) {
    --counts_[static_cast<std::size_t>(window_[next_])];
  } else {
    ++filled_;
  }
  window_[next_] = raw;
  ++counts_[static_cast<std::size_t>(raw)];
  next_ = (next_ + 1) % window_.size();
  // Three quarters of the window's frames (rounded up), at least one.
  const std::size_t need = std::max<std::size_t>(1, (3 * window_.size() + 3) / 4);
  if (raw != held_ && counts_[static_cast<std::size_t>(raw)] >= need) {
    BandChange change{held_, raw, run_start_s_, time_s};
    held_ = raw;
    return change;
  }
  return std::nullopt;
}

}  // namespace pitchwire::dsp
