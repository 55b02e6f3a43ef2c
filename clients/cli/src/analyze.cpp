// analyze.cpp: see analyze.h.
#include "analyze.h"

#include <unistd.h>

#include <cstdint>
#include <cstdio>
#include <exception>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "output.h"
#include "pitchwire/audiofile/audio_file.h"
#include "pitchwire/dsp/contour_smoother.h"
#include "pitchwire/dsp/pitch_tracker.h"

namespace pitchwire::cli {
namespace {

constexpr std::size_t kBlockFrames = 4096;

// A percentage on stderr, rewritten in place, only when stderr is a terminal (and stdout is not the
// same screen, where it would break the rows).
class Progress {
 public:
  explicit Progress(std::string label)
      : label_(std::move(label)), enabled_(::isatty(STDERR_FILENO) == 1 && ::isatty(STDOUT_FILENO) == 0) {}
  ~Progress() { clear(); }
  Progress(const Progress&) = delete;
  Progress& operator=(const Progress&) = delete;

  void update(std::int64_t done, std::int64_t total) {
    if (!enabled_ || total <= 0) return;
    const auto percent = static_cast<int>(100 * done / total);
    if (percent == last_) return;
    last_ = percent;
    std::fprintf(stderr, "\r%s %3d%%", label_.c_str(), percent);
    std::fflush(stderr);
    shown_ = true;
  }

  void clear() {
    if (!shown_) return;
    std::fputs("\r\033[K", stderr);
    std::fflush(stderr);
    shown_ = false;
  }

 private:
  std::string label_;
  bool enabled_;
  bool shown_ = false;
  int last_ = -1;
};

// Writes a row per settled frame. With the smoothing stage, rows wait (a bounded number of frames,
// the stage's delay) until the stage has the smoothed value of the same frame.
class RowSink final : public dsp::FrameSink {
 public:
  RowSink(Output& out, FrameFormat format, std::optional<dsp::SmootherConfig> smoothing)
      : out_(out), format_(format) {
    line_.reserve(256);
    if (smoothing) {
      smoother_.emplace(*smoothing);
      pending_.resize(static_cast<std::size_t>(smoother_->delay_frames()) + 2);
    }
  }

  void on_live(const dsp::LiveFrame& /*frame*/) override {}

  void on_settled(const dsp::SettledFrame& frame) override {
    if (!smoother_) {
      write(frame, nullptr);
      return;
    }
    pending_[slot(frame.index)] = frame;
    dsp::SmoothedFrame smoothed;
    if (smoother_->push(frame, &smoothed) == 1) write(pending_[slot(smoothed.index)], &smoothed);
  }

  // End of stream: the rows still held by the smoothing stage.
  void finish() {
    if (!smoother_) return;
    std::vector<dsp::SmoothedFrame> rest;
    smoother_->flush(rest);
    for (const auto& smoothed : rest) write(pending_[slot(smoothed.index)], &smoothed);
  }

 private:
  [[nodiscard]] std::size_t slot(std::int64_t index) const {
    return static_cast<std::size_t>(index % static_cast<std::int64_t>(pending_.size()));
  }

  void write(const dsp::SettledFrame& frame, const dsp::SmoothedFrame* smoothed) {
    if (!out_.ok()) return;
    line_.clear();
    append_frame(line_, frame, format_, smoothed);
    out_.write(line_);
  }

  Output& out_;
  FrameFormat format_;
  std::string line_;
  std::optional<dsp::ContourSmoother> smoother_;
  std::vector<dsp::SettledFrame> pending_;  // ring of frames awaiting their smoothed value
};

void report(const std::string& message) { std::fprintf(stderr, "pitchwire analyze: %s\n", message.c_str()); }

// After a write failure: quiet when the reader went away, a message otherwise.
int output_failure(const Output& out) {
  if (out.closed()) return 0;
  report("stdout: " + out.error_message());
  return 1;
}

}  // namespace

int run_analyze(const AnalyzeOptions& options) {
  dsp::TrackerConfig config;
  if (options.hop_ms) config.hop_ms = *options.hop_ms;
  if (options.f0_min_hz) config.f0_min_hz = *options.f0_min_hz;
  if (options.f0_max_hz) config.f0_max_hz = *options.f0_max_hz;
  if (options.settle_ms) config.settle_ms = *options.settle_ms;
  config.hum_cancel = options.hum_cancel;
  // Option values are checked before the file is opened, at the default input rate.
  if (const std::string problem = config.validate(); !problem.empty()) {
    report(problem);
    return 2;
  }

  const std::string& path = options.path;
  std::optional<audiofile::AudioFileReader> reader;
  try {
    reader.emplace(path, audiofile::ReadOptions{options.channel, kBlockFrames});
  } catch (const audiofile::AudioFileError& e) {
    report(path + ": " + e.what());
    return 2;
  }
  const audiofile::AudioFileInfo& info = reader->info();
  config.sample_rate_hz = info.sample_rate_hz;
  if (const std::string problem = config.validate(); !problem.empty()) {
    report(path + ": " + problem);
    return 2;
  }

  std::optional<dsp::PitchTracker> tracker;
  try {
    tracker.emplace(config);
  } catch (const std::exception& e) {
    report(path + ": " + e.what());
    return 2;
  }

  std::optional<dsp::SmootherConfig> smoothing;
  if (options.smooth) {
    smoothing.emplace();
    smoothing->hop_ms = config.hop_ms;
    if (options.bridge_ms) smoothing->bridge_max_ms = *options.bridge_ms;
    if (const std::string problem = smoothing->validate(); !problem.empty()) {
      report(problem);
      return 2;
    }
  }

  Output out(STDOUT_FILENO);
  RowSink sink(out, options.format, smoothing);
  out.write(frame_header(options.format, options.smooth));
  Progress progress("pitchwire analyze: " + path);

  try {
    for (auto block = reader->read_block(); !block.empty(); block = reader->read_block()) {
      tracker->process(block, sink);
      if (!out.ok()) return output_failure(out);
      progress.update(reader->frames_read(), info.frames);
    }
  } catch (const audiofile::AudioFileError& e) {
    // The stream ends where the problem is: the frames before it are written, nothing after it is
    // analysed, and the message follows.
    tracker->flush(sink);
    sink.finish();
    progress.clear();
    if (!out.flush()) return output_failure(out);
    report(path + ": " + e.what());
    return 2;
  }
  tracker->flush(sink);
  sink.finish();
  progress.clear();
  if (!out.flush()) return output_failure(out);
  return 0;
}

}  // namespace pitchwire::cli
