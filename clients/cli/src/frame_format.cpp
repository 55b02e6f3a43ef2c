// frame_format.cpp: see frame_format.h.
#include "frame_format.h"

#include <optional>

#include "pitchwire/protocol/number_text.h"

namespace pitchwire::cli {

using protocol::append_fixed;
using protocol::widen;

std::string_view frame_header(FrameFormat format, bool smoothed) {
  if (format != FrameFormat::kCsv) return "";
  return smoothed ? "time_s,f0_hz,f0_live_hz,voicing,confidence,level_dbfs,f0_smoothed_hz,bridged\n"
                  : "time_s,f0_hz,f0_live_hz,voicing,confidence,level_dbfs\n";
}

void append_frame(std::string& out, const dsp::SettledFrame& frame, FrameFormat format,
                  const dsp::SmoothedFrame* smoothed) {
  if (format == FrameFormat::kCsv) {
    append_fixed(out, frame.time_s, 6, "");
    out += ',';
    append_fixed(out, widen(frame.f0_hz), 3, "");
    out += ',';
    append_fixed(out, widen(frame.live_f0_hz), 3, "");
    out += ',';
    append_fixed(out, frame.voicing, 3, "");
    out += ',';
    append_fixed(out, frame.confidence, 3, "");
    out += ',';
    append_fixed(out, frame.level_dbfs, 2, "");
    if (smoothed) {
      out += ',';
      append_fixed(out, widen(smoothed->f0_hz), 3, "");
      out += smoothed->bridged ? ",1" : ",0";
    }
    out += '\n';
    return;
  }
  out += "{\"time_s\":";
  append_fixed(out, frame.time_s, 6, "null");
  out += ",\"f0_hz\":";
  append_fixed(out, widen(frame.f0_hz), 3, "null");
  out += ",\"f0_live_hz\":";
  append_fixed(out, widen(frame.live_f0_hz), 3, "null");
  out += ",\"voicing\":";
  append_fixed(out, frame.voicing, 3, "null");
  out += ",\"confidence\":";
  append_fixed(out, frame.confidence, 3, "null");
  out += ",\"level_dbfs\":";
  append_fixed(out, frame.level_dbfs, 2, "null");
  if (smoothed) {
    out += ",\"f0_smoothed_hz\":";
    append_fixed(out, widen(smoothed->f0_hz), 3, "null");
    out += smoothed->bridged ? ",\"bridged\":true" : ",\"bridged\":false";
  }
  out += "}\n";
}

}  // namespace pitchwire::cli
