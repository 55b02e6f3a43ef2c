// demo.cpp: see demo.h.
#include "demo.h"

#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstdarg>
#include <cstdio>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "frame_format.h"
#include "output.h"
#include "pitchwire/dsp/pitch_tracker.h"
#include "pitchwire/dsp/range_stats.h"
#include "pitchwire/dsp/units.h"
#include "pitchwire/dsp/voice_synth.h"

namespace pitchwire::cli {
namespace {

constexpr double kDemoRateHz = 16000.0;
constexpr std::size_t kBlockFrames = 512;  // fed like a live stream, 32 ms at a time
constexpr double kAgreementCents = 50.0;

constexpr const char* kCareNote =
    "pitchwire is not a medical device; voice exercises belong under the supervision of a licensed "
    "clinician or qualified coach; stop on pain, strain or hoarseness.";

// Keeps every settled frame and, when asked, writes it as CSV.
class CollectSink final : public dsp::FrameSink {
 public:
  explicit CollectSink(Output* csv) : csv_(csv) {
    if (csv_ != nullptr) csv_->write(frame_header(FrameFormat::kCsv));
  }
  void on_live(const dsp::LiveFrame& /*frame*/) override {}
  void on_settled(const dsp::SettledFrame& frame) override {
    frames.push_back(frame);
    if (csv_ != nullptr) {
      line_.clear();
      append_frame(line_, frame, FrameFormat::kCsv);
      csv_->write(line_);
    }
  }

  std::vector<dsp::SettledFrame> frames;

 private:
  Output* csv_;
  std::string line_;
};

std::string format(const char* fmt, ...) __attribute__((format(printf, 1, 2)));
std::string format(const char* fmt, ...) {
  std::va_list args;
  va_start(args, fmt);
  char buf[512];
  std::vsnprintf(buf, sizeof buf, fmt, args);
  va_end(args);
  return buf;
}

}  // namespace

int run_demo(const DemoOptions& options) {
  const dsp::Rendered voice = dsp::render_demo_session(kDemoRateHz);
  dsp::TrackerConfig config;
  config.sample_rate_hz = voice.sample_rate_hz;
  dsp::PitchTracker tracker(config);

  std::optional<Output> csv;
  if (options.csv_path) {
    csv.emplace(Output::to_file(*options.csv_path));
    if (!csv->ok()) {
      std::fprintf(stderr, "pitchwire demo: %s: cannot write: %s\n", options.csv_path->c_str(),
                   csv->error_message().c_str());
      return 1;
    }
  }
  CollectSink sink(csv ? &*csv : nullptr);
  const std::span<const float> samples(voice.samples);
  for (std::size_t at = 0; at < samples.size(); at += kBlockFrames) {
    tracker.process(samples.subspan(at, std::min(kBlockFrames, samples.size() - at)), sink);
  }
  tracker.flush(sink);
  if (csv && !csv->flush()) {
    std::fprintf(stderr, "pitchwire demo: %s: cannot write: %s\n", options.csv_path->c_str(),
                 csv->error_message().c_str());
    return 1;
  }

  // Figures.
  const double duration_s = static_cast<double>(samples.size()) / voice.sample_rate_hz;
  const double hop_s = config.hop_ms / 1000.0;
  std::vector<double> f0;
  std::size_t truth_frames = 0;
  std::size_t voicing_agree = 0;
  std::size_t both_voiced = 0;
  std::size_t within = 0;
  for (const dsp::SettledFrame& frame : sink.frames) {
    if (frame.f0_hz) f0.push_back(static_cast<double>(*frame.f0_hz));
    if (frame.time_s >= duration_s) continue;  // the truth covers [0, duration)
    ++truth_frames;
    const auto truth_hz = static_cast<double>(voice.truth_at(frame.time_s));  // 0 where unvoiced
    const bool truth_voiced = truth_hz > 0.0;
    if (truth_voiced == frame.f0_hz.has_value()) ++voicing_agree;
    if (truth_voiced && frame.f0_hz) {
      ++both_voiced;
      if (std::abs(dsp::cents(static_cast<double>(*frame.f0_hz), truth_hz)) <= kAgreementCents) ++within;
    }
  }
  const std::optional<dsp::F0Range> range = dsp::f0_range(f0);
  const auto share = [](std::size_t part, std::size_t whole) {
    return whole == 0 ? 0.0 : 100.0 * static_cast<double>(part) / static_cast<double>(whole);
  };

  std::string text;
  text += format("pitchwire demo: the built-in test voice at %.0f Hz, tracked as a live stream\n",
                 voice.sample_rate_hz);
  text += format("(hop %g ms; the settled value follows each hop by %g ms)\n\n", config.hop_ms,
                 config.settle_ms);
  text += format("  duration               %.2f s (%zu frames)\n", duration_s, sink.frames.size());
  text += format("  voiced time            %.2f s (%.1f %% of the frames)\n",
                 static_cast<double>(f0.size()) * hop_s, share(f0.size(), sink.frames.size()));
  if (!range) {
    text += "  median F0              no voiced frames\n";
  } else {
    const dsp::NoteReading note = dsp::nearest_note(range->median_hz);
    text += format("  median F0              %.1f Hz (%s %+.0f cents)\n", range->median_hz, note.name.c_str(),
                   note.cents_off);
    text += format("  F0 range, p5 to p95    %.1f Hz to %.1f Hz (%.1f semitones wide)\n", range->p5_hz,
                   range->p95_hz, range->p5_p95_semitones);
  }
  text += "\n  settled track against the synthesizer's truth:\n";
  text += format("  F0 within %.0f cents     %.1f %% of the %zu frames voiced in both\n", kAgreementCents,
                 share(within, both_voiced), both_voiced);
  text += format("  voicing agreement      %.1f %% of %zu frames\n", share(voicing_agree, truth_frames),
                 truth_frames);
  text += "\n";
  text += kCareNote;
  text += "\n";

  Output out(STDOUT_FILENO);
  out.write(text);
  if (!out.flush() && !out.closed()) {
    std::fprintf(stderr, "pitchwire demo: stdout: %s\n", out.error_message().c_str());
    return 1;
  }
  return 0;
}

}  // namespace pitchwire::cli
