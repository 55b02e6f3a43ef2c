// analyze.h: `pitchwire analyze FILE`: runs the pitch tracker over a sound file and writes one line
// per hop to stdout.
#pragma once

#include <optional>
#include <string>

#include "frame_format.h"

namespace pitchwire::cli {

struct AnalyzeOptions {
  std::string path;
  FrameFormat format = FrameFormat::kCsv;
  std::optional<double> hop_ms;
  std::optional<double> f0_min_hz;
  std::optional<double> f0_max_hz;
  std::optional<double> settle_ms;
  std::optional<int> channel;  // 1-based; empty: mean of all channels
  bool hum_cancel = true;
  bool smooth = false;               // add the smoothing stage's columns
  std::optional<double> bridge_ms;   // with smooth: bridge unvoiced gaps up to this long
};

// Exit codes: 0 done (or stdout closed by the reader), 1 stdout could not be written, 2 bad input.
int run_analyze(const AnalyzeOptions& options);

}  // namespace pitchwire::cli
