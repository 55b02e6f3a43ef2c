// frame_format.cpp: see frame_format.h.
#include "frame_format.h"

#include <array>
#include <charconv>
#include <cmath>
#include <optional>

namespace pitchwire::cli {
namespace {

// Appends value with a fixed number of decimals, or `missing` when the value is absent or not finite.
void append_number(std::string& out, std::optional<double> value, int decimals, std::string_view missing) {
  if (!value || !std::isfinite(*value)) {
    out += missing;
    return;
  }
  std::array<char, 64> buf{};
  const auto [end, ec] =
      std::to_chars(buf.data(), buf.data() + buf.size(), *value, std::chars_format::fixed, decimals);
  if (ec != std::errc()) {
    out += missing;
    return;
  }
  out.append(buf.data(), end);
}

std::optional<double> widen(const std::optional<float>& v) {
  return v ? std::optional<double>(static_cast<double>(*v)) : std::nullopt;
}

}  // namespace

std::string_view frame_header(FrameFormat format, bool smoothed) {
  if (format != FrameFormat::kCsv) return "";
  return smoothed ? "time_s,f0_hz,f0_live_hz,voicing,confidence,level_dbfs,f0_smoothed_hz,bridged\n"
                  : "time_s,f0_hz,f0_live_hz,voicing,confidence,level_dbfs\n";
}

void append_frame(std::string& out, const dsp::SettledFrame& frame, FrameFormat format,
                  const dsp::SmoothedFrame* smoothed) {
  if (format == FrameFormat::kCsv) {
    append_number(out, frame.time_s, 6, "");
    out += ',';
    append_number(out, widen(frame.f0_hz), 3, "");
    out += ',';
    append_number(out, widen(frame.live_f0_hz), 3, "");
    out += ',';
    append_number(out, frame.voicing, 3, "");
    out += ',';
    append_number(out, frame.confidence, 3, "");
    out += ',';
    append_number(out, frame.level_dbfs, 2, "");
    if (smoothed) {
      out += ',';
      append_number(out, widen(smoothed->f0_hz), 3, "");
      out += smoothed->bridged ? ",1" : ",0";
    }
    out += '\n';
    return;
  }
  out += "{\"time_s\":";
  append_number(out, frame.time_s, 6, "null");
  out += ",\"f0_hz\":";
  append_number(out, widen(frame.f0_hz), 3, "null");
  out += ",\"f0_live_hz\":";
  append_number(out, widen(frame.live_f0_hz), 3, "null");
  out += ",\"voicing\":";
  append_number(out, frame.voicing, 3, "null");
  out += ",\"confidence\":";
  append_number(out, frame.confidence, 3, "null");
  out += ",\"level_dbfs\":";
  append_number(out, frame.level_dbfs, 2, "null");
  if (smoothed) {
    out += ",\"f0_smoothed_hz\":";
    append_number(out, widen(smoothed->f0_hz), 3, "null");
    out += smoothed->bridged ? ",\"bridged\":true" : ",\"bridged\":false";
  }
  out += "}\n";
}

}  // namespace pitchwire::cli
