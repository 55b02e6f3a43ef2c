// frame_format.h: one settled frame as a CSV row or a JSON line.
//
// Fields, in this order: time_s (6 decimals), f0_hz and f0_live_hz (3 decimals; empty in CSV and
// null in JSON when unvoiced), voicing and confidence (3 decimals), level_dbfs (2 decimals).
// Numbers are written with std::to_chars: no locale, a full stop as decimal separator.
#pragma once

#include <string>
#include <string_view>

#include "pitchwire/dsp/pitch_tracker.h"

namespace pitchwire::cli {

enum class FrameFormat { kCsv, kJsonl };

// The CSV header line (with its newline); empty for JSON lines.
[[nodiscard]] std::string_view frame_header(FrameFormat format);

// Appends one line (with its newline) to out.
void append_frame(std::string& out, const dsp::SettledFrame& frame, FrameFormat format);

}  // namespace pitchwire::cli
