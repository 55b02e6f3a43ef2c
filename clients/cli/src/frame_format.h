// frame_format.h: one settled frame as a CSV row or a JSON line.
//
// Fields, in this order: time_s (6 decimals), f0_hz and f0_live_hz (3 decimals; empty in CSV and
// null in JSON when unvoiced), voicing and confidence (3 decimals), level_dbfs (2 decimals).
// Numbers are written with protocol::append_fixed (std::to_chars): no locale, a full stop as decimal
// separator, the same text as the protocol's frames.
#pragma once

#include <string>
#include <string_view>

#include "pitchwire/dsp/contour_smoother.h"
#include "pitchwire/dsp/pitch_tracker.h"

namespace pitchwire::cli {

enum class FrameFormat { kCsv, kJsonl };

// The CSV header line (with its newline); empty for JSON lines. With `smoothed`, two more columns:
// f0_smoothed_hz (3 decimals, empty/null when unvoiced and not bridged) and bridged (0 or 1).
[[nodiscard]] std::string_view frame_header(FrameFormat format, bool smoothed = false);

// Appends one line (with its newline) to out; `smoothed`, when given, adds the smoothing stage's fields.
void append_frame(std::string& out, const dsp::SettledFrame& frame, FrameFormat format,
                  const dsp::SmoothedFrame* smoothed = nullptr);

}  // namespace pitchwire::cli
