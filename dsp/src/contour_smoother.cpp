// contour_smoother.cpp: see contour_smoother.h.
#include "pitchwire/dsp/contour_smoother.h"

#include <algorithm>
#include <cmath>
#include <stdexcept>
#include <string>

#include "pitchwire/dsp/units.h"

namespace pitchwire::dsp {
namespace {
constexpr double kRefHz = 100.0;  // semitone reference for internal values; cancels out
}

std::string SmootherConfig::validate() const {
  if (!(hop_ms >= 2.5 && hop_ms <= 10)) return "hop_ms = " + std::to_string(hop_ms) + " is out of range; allowed: 2.5 to 10";
  if (!(median_ms >= 0 && median_ms <= 200))
    return "median_ms = " + std::to_string(median_ms) + " is out of range; allowed: 0 to 200";
  if (!(bridge_max_ms >= 0 && bridge_max_ms <= 500))
    return "bridge_max_ms = " + std::to_string(bridge_max_ms) + " is out of range; allowed: 0 to 500";
  return {};
}

ContourSmoother::ContourSmoother(const SmootherConfig& config) : cfg_(config) {
  if (auto err = cfg_.validate(); !err.empty()) throw std::invalid_argument(err);
  half_ = static_cast<int>(std::lround(cfg_.median_ms / cfg_.hop_ms / 2.0));
  bridge_ = static_cast<int>(std::floor(cfg_.bridge_max_ms / cfg_.hop_ms + 1e-9));
  delay_ = std::max(half_, bridge_ + 1);
  ring_.resize(static_cast<std::size_t>(2 * delay_ + half_ + 2));
  scratch_.reserve(static_cast<std::size_t>(2 * half_ + 1));
}

const ContourSmoother::Held& ContourSmoother::at(std::int64_t index) const {
  static const Held kNone{};
  if (index < 0 || index >= next_in_ || index < next_in_ - static_cast<std::int64_t>(ring_.size())) return kNone;
  return ring_[static_cast<std::size_t>(index % static_cast<std::int64_t>(ring_.size()))];
}

SmoothedFrame ContourSmoother::finish(std::int64_t i) const {
  const Held& h = at(i);
  SmoothedFrame out;
  out.index = h.index;
  out.time_s = h.time_s;
  if (h.st) {
    // Median of the voiced values within +-half_ frames, not crossing an unvoiced frame.
    scratch_.clear();
    scratch_.push_back(*h.st);
    for (std::int64_t j = i - 1; j >= i - half_ && at(j).st; --j) scratch_.push_back(*at(j).st);
    for (std::int64_t j = i + 1; j <= i + half_ && at(j).st; ++j) scratch_.push_back(*at(j).st);
    auto mid = scratch_.begin() + static_cast<std::ptrdiff_t>(scratch_.size() / 2);
    std::nth_element(scratch_.begin(), mid, scratch_.end());
    out.f0_hz = static_cast<float>(hz_from_semitones(*mid, kRefHz));
    return out;
  }
  if (bridge_ > 0) {
    std::int64_t p = i - 1, q = i + 1;
    while (p >= i - bridge_ && at(p).index >= 0 && !at(p).st) --p;
    while (q <= i + bridge_ && at(q).index >= 0 && !at(q).st) ++q;
    const Held& a = at(p);
    const Held& b = at(q);
    if (a.st && b.st && q - p - 1 <= bridge_) {
      const double w = static_cast<double>(i - p) / static_cast<double>(q - p);
      out.f0_hz = static_cast<float>(hz_from_semitones(*a.st + w * (*b.st - *a.st), kRefHz));
      out.bridged = true;
    }
  }
  return out;
}

std::size_t ContourSmoother::push(const SettledFrame& frame, SmoothedFrame* out) {
  Held& h = ring_[static_cast<std::size_t>(next_in_ % static_cast<std::int64_t>(ring_.size()))];
  h.index = frame.index;
  h.time_s = frame.time_s;
  h.st = frame.f0_hz ? std::optional<float>(static_cast<float>(semitones(*frame.f0_hz, kRefHz))) : std::nullopt;
  ++next_in_;
  if (next_in_ - next_out_ <= delay_) return 0;
  *out = finish(next_out_++);
  return 1;
}

std::size_t ContourSmoother::flush(std::vector<SmoothedFrame>& out) {
  std::size_t n = 0;
  while (next_out_ < next_in_) {
    out.push_back(finish(next_out_++));
    ++n;
  }
  next_in_ = next_out_ = 0;
  return n;
}

}  // namespace pitchwire::dsp
