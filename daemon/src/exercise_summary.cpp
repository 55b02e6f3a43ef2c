// exercise_summary.cpp: see exercise_summary.h.
#include "pitchwire/daemon/exercise_summary.h"

#include <algorithm>
#include <array>
#include <string>
#include <cmath>

#include "pitchwire/dsp/band_tracker.h"
#include "pitchwire/dsp/range_stats.h"

namespace pitchwire::daemon {
namespace {

double round3(double x) { return std::round(x * 1000.0) / 1000.0; }

}  // namespace

void ExerciseSummary::add(std::optional<float> f0_hz, const std::vector<protocol::Band>& bands) {
  ++frames_;
  for (const protocol::Band& b : bands) {
    if (!bands_.count(b.name)) band_order_.push_back(b.name);
    BandCount& c = bands_[b.name];
    if (!f0_hz) continue;
    ++c.voiced;
    if (dsp::band_position(f0_hz, b.low_hz, b.high_hz) == dsp::BandPosition::inside) ++c.inside;
  }
  if (!f0_hz || !std::isfinite(*f0_hz) || *f0_hz <= 0.0f) return;
  f0s_.push_back(*f0_hz);
  cycles_ += static_cast<double>(*f0_hz) * hop_s_;
}

protocol::Json ExerciseSummary::to_json(double duration_s, const std::vector<std::string>& measures,
                                        double reference_hz) const {
  protocol::Json j;
  const auto voiced = static_cast<std::int64_t>(f0s_.size());
  j["duration_s"] = round3(duration_s);
  j["settled_s"] = round3(static_cast<double>(frames_) * hop_s_);
  j["voiced_s"] = round3(static_cast<double>(voiced) * hop_s_);
  j["voiced_fraction"] = frames_ > 0 ? round3(static_cast<double>(voiced) / static_cast<double>(frames_)) : 0.0;
  j["cycle_dose"] = std::round(cycles_ * 10.0) / 10.0;
  std::vector<double> f0s = f0s_;
  const auto sd = dsp::f0_sd_semitones(f0s);
  const auto range = dsp::f0_range(f0s);  // sorts f0s
  auto put = [&](const char* key, std::optional<double> v) {
    j[key] = v ? protocol::Json(round3(*v)) : protocol::Json(nullptr);
  };
  const std::array<std::pair<const char*, std::optional<double>>, 5> points = {{
      {"min", range ? std::optional<double>(f0s.front()) : std::nullopt},
      {"p5", range ? std::optional<double>(range->p5_hz) : std::nullopt},
      {"p50", range ? std::optional<double>(range->median_hz) : std::nullopt},
      {"p95", range ? std::optional<double>(range->p95_hz) : std::nullopt},
      {"max", range ? std::optional<double>(f0s.back()) : std::nullopt},
  }};
  for (const auto& [name, hz] : points) put(("f0_" + std::string(name) + "_hz").c_str(), hz);
  j["reference_hz"] = reference_hz;
  for (const auto& [name, hz] : points) {
    put(("f0_" + std::string(name) + "_st").c_str(), hz ? std::optional<double>(12.0 * std::log2(*hz / reference_hz)) : std::nullopt);
  }
  put("f0_range_st", range ? std::optional<double>(12.0 * std::log2(range->p95_hz / range->p5_hz)) : std::nullopt);
  put("f0_sd_st", sd);
  protocol::Json bands = protocol::Json::array();
  for (const std::string& name : band_order_) {
    const BandCount& c = bands_.at(name);
    bands.push_back({{"name", name},
                     {"inside_fraction", c.voiced > 0 ? protocol::Json(round3(static_cast<double>(c.inside) /
                                                                              static_cast<double>(c.voiced)))
                                                      : protocol::Json(nullptr)}});
  }
  j["bands"] = std::move(bands);
  j["measures"] = measures;
  return j;
}

}  // namespace pitchwire::daemon
