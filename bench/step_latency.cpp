// step_latency: the estimator's share of the live latency, without a sound server or a network.
//
// Renders steady vowels (the dsp synthesizer, no jitter, shimmer or aspiration) that change F0 at known
// samples, feeds them to a PitchTracker in blocks of a sound server's period (default 48 kHz, 256 samples,
// as the JACK latency benchmark in tests/daemon/jack_live.py), and for every step measures the input time
// from the step's first sample to the end of the block after which the first live frame within 50 cents of
// the new F0 came out. That is what the daemon adds between the capture callback and the network, less the
// ring poll (at most 1 ms). Prints p50, p95, p99 and max per voice and over all, and how many steps never
// reached the new F0 before the next step.
//
//   step_latency [--rate HZ] [--block N] [--each S] [--voice male|female|child|all] [--repeats N] [--detail]
//
// --detail prints, per step, the frame that first reached the new F0: its centre relative to the step and
// the input time from its centre to the block that brought it out.
//
// The default steps are those of the JACK benchmark (165, 220, 147, 196 Hz for the male voice); the female
// and child voices use the same intervals an octave higher.
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "pitchwire/dsp/pitch_tracker.h"
#include "pitchwire/dsp/voice_synth.h"

namespace {

using pitchwire::dsp::FrameSink;
using pitchwire::dsp::LiveFrame;
using pitchwire::dsp::PitchTracker;
using pitchwire::dsp::SettledFrame;
using pitchwire::dsp::TrackerConfig;
namespace dsp = pitchwire::dsp;

struct Options {
  double rate_hz = 48000.0;
  std::size_t block = 256;
  double each_s = 0.6;
  std::string voice = "all";
  int repeats = 8;
  bool detail = false;
};

// The newest live frames of the block just processed.
class Collector final : public FrameSink {
 public:
  void on_live(const LiveFrame& frame) override { live.push_back(frame); }
  void on_settled(const SettledFrame&) override {}
  std::vector<LiveFrame> live;
};

// Steady vowels, step k from sample starts[k] to starts[k + 1].
std::vector<float> render_steps(dsp::VoiceType type, const std::vector<double>& f0s, double rate_hz,
                                const std::vector<std::size_t>& starts) {
  dsp::Script script;
  script.voice = dsp::default_voice(type);
  script.voice.jitter_pct = 0.0;
  script.voice.shimmer_pct = 0.0;
  script.voice.aspiration = 0.0;
  for (std::size_t k = 0; k < f0s.size(); ++k) {
    const double f0 = f0s[k];
    dsp::Segment segment;
    segment.phone = dsp::Phone::aa;
    segment.duration_s = static_cast<double>(starts[k + 1] - starts[k]) / rate_hz;
    segment.f0_start_hz = f0;
    segment.f0_end_hz = f0;
    script.segments.push_back(segment);
  }
  dsp::Rendered rendered = dsp::render(script, rate_hz);
  rendered.samples.resize(starts.back(), 0.0f);
  return std::move(rendered.samples);
}

double cents(double a, double b) { return 1200.0 * std::log2(a / b); }

double percentile(std::vector<double> v, double p) {
  std::sort(v.begin(), v.end());
  return v[std::min(v.size() - 1, static_cast<std::size_t>(std::lround(p * static_cast<double>(v.size() - 1))))];
}

struct Result {
  std::vector<double> latency_ms;
  int missed = 0;
};

Result measure(dsp::VoiceType type, double scale, const Options& o) {
  std::vector<double> f0s;
  for (int r = 0; r < o.repeats; ++r) {
    for (const double f : {165.0, 220.0, 147.0, 196.0}) f0s.push_back(f * scale);
  }
  // Step k starts at starts[k]. Steps are each_s long plus 0..7 eighths of a hop, in turn, so that the
  // steps fall at every phase of the hop grid (a sound server's stream starts at an arbitrary phase).
  const double hop_samples = 0.005 * o.rate_hz;
  std::vector<std::size_t> starts(f0s.size() + 1, 0);
  for (std::size_t k = 0; k < f0s.size(); ++k) {
    const double len = o.each_s * o.rate_hz + static_cast<double>(k % 8) * hop_samples / 8.0;
    starts[k + 1] = starts[k] + static_cast<std::size_t>(std::lround(len));
  }
  const std::vector<float> x = render_steps(type, f0s, o.rate_hz, starts);
  TrackerConfig cfg;
  cfg.sample_rate_hz = o.rate_hz;
  PitchTracker tracker(cfg);
  Collector sink;
  Result result;
  std::size_t step = 1;  // the first step is the voice's onset: not a step change
  std::optional<double> found;
  for (std::size_t pos = 0; pos < x.size(); pos += o.block) {
    const std::size_t n = std::min(o.block, x.size() - pos);
    sink.live.clear();
    tracker.process(std::span<const float>(x.data() + pos, n), sink);
    const std::size_t end = pos + n;
    // Steps whose successor has begun by now are finished (found or missed).
    while (step < f0s.size() && end > starts[step + 1]) {
      if (!found) ++result.missed;
      found.reset();
      ++step;
    }
    if (step >= f0s.size()) break;
    const double step_s = static_cast<double>(starts[step]) / o.rate_hz;
    if (end <= starts[step] || found) continue;
    for (const LiveFrame& f : sink.live) {
      if (f.time_s > step_s - 0.05 && f.f0_hz && std::abs(cents(*f.f0_hz, f0s[step])) <= 50.0) {
        found = static_cast<double>(end - starts[step]) / o.rate_hz * 1000.0;
        result.latency_ms.push_back(*found);
        if (o.detail)
          std::printf("  step %zu %.0f->%.0f Hz: latency %.1f ms = frame centre %+.1f ms after the step + %.1f ms "
                      "until out\n", step, f0s[step - 1], f0s[step], *found, (f.time_s - step_s) * 1000.0,
                      (static_cast<double>(end) / o.rate_hz - f.time_s) * 1000.0);
        break;
      }
    }
  }
  return result;
}

void print(const char* name, const Result& r) {
  if (r.latency_ms.empty()) {
    std::printf("%-8s no step reached the new F0 (missed %d)\n", name, r.missed);
    return;
  }
  double mean = 0.0;
  for (const double v : r.latency_ms) mean += v;
  mean /= static_cast<double>(r.latency_ms.size());
  std::printf("%-8s steps %3zu missed %d  ms: mean %5.1f  p50 %5.1f  p95 %5.1f  p99 %5.1f  max %5.1f\n", name,
              r.latency_ms.size(), r.missed, mean, percentile(r.latency_ms, 0.5), percentile(r.latency_ms, 0.95),
              percentile(r.latency_ms, 0.99), *std::max_element(r.latency_ms.begin(), r.latency_ms.end()));
}

int usage(const char* why) {
  std::fprintf(stderr, "step_latency: %s\nusage: step_latency [--rate HZ] [--block N] [--each S] "
               "[--voice male|female|child|all] [--repeats N] [--detail]\n", why);
  return 2;
}

}  // namespace

int main(int argc, char** argv) {
  Options o;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto value = [&]() -> const char* { return i + 1 < argc ? argv[++i] : nullptr; };
    const char* v = nullptr;
    if (a == "--rate" && (v = value())) o.rate_hz = std::atof(v);
    else if (a == "--block" && (v = value())) o.block = static_cast<std::size_t>(std::atol(v));
    else if (a == "--each" && (v = value())) o.each_s = std::atof(v);
    else if (a == "--voice" && (v = value())) o.voice = v;
    else if (a == "--repeats" && (v = value())) o.repeats = std::atoi(v);
    else if (a == "--detail") o.detail = true;
    else return usage(("unknown or incomplete option " + a).c_str());
  }
  if (o.rate_hz < 8000 || o.rate_hz > 96000) return usage("--rate must be 8000..96000");
  if (o.block < 1 || o.block > 8192) return usage("--block must be 1..8192");
  if (o.each_s < 0.1) return usage("--each must be at least 0.1 s");
  if (o.repeats < 1) return usage("--repeats must be at least 1");
  std::printf("step_latency: %.0f Hz input in %zu-sample blocks, %.2f s per step; time from a step's first "
              "sample to the block that brings a live frame within 50 cents of the new F0\n",
              o.rate_hz, o.block, o.each_s);
  Result all;
  struct V { const char* name; dsp::VoiceType type; double scale; };
  for (const V v : {V{"male", dsp::VoiceType::male, 1.0}, V{"female", dsp::VoiceType::female, 2.0},
                    V{"child", dsp::VoiceType::child, 2.0}}) {
    if (o.voice != "all" && o.voice != v.name) continue;
    const Result r = measure(v.type, v.scale, o);
    print(v.name, r);
    all.latency_ms.insert(all.latency_ms.end(), r.latency_ms.begin(), r.latency_ms.end());
    all.missed += r.missed;
  }
  if (o.voice == "all") print("all", all);
  return all.latency_ms.empty() ? 1 : 0;
}
