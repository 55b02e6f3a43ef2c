// bench_tracker: per-hop cost of PitchTracker::process (Google Benchmark).
//
// One iteration feeds one hop (5 ms) of a synthetic voice-like signal to a tracker running at 16, 44.1 or
// 48 kHz, with the default configuration (search range 50-1400 Hz, settled lag 60 ms, hum canceller on).
// At 44.1 kHz a hop is 220.5 samples, so blocks of 220 and 221 samples alternate, as a stream would.
// Counters:
//   hop_time   seconds of processing per hop (the same as the iteration time, as a counter)
//   rtf        real-time factor: processing time / audio time (0.01 = 1 % of one core)
//   frames     live + settled frames delivered per hop (about 2 once the pipeline is full)
#include <benchmark/benchmark.h>

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <numbers>
#include <random>
#include <span>
#include <string>
#include <vector>

#include "pitchwire/dsp/pitch_tracker.h"

namespace {

using pitchwire::dsp::FrameSink;
using pitchwire::dsp::LiveFrame;
using pitchwire::dsp::PitchTracker;
using pitchwire::dsp::SettledFrame;
using pitchwire::dsp::TrackerConfig;

constexpr double kHopMs = 5.0;
constexpr double kSignalSeconds = 8.0;

// A voice-like test signal: a glottal-pulse train (raised-cosine opening, faster closing, then closed)
// whose F0 wanders between about 90 and 260 Hz with 5.5 Hz vibrato, through two resonances
// (700 Hz and 1200 Hz, Klatt-style two-pole sections: A = 1 - B - C, B = 2e^(-pi BW T) cos(2 pi F T),
// C = -e^(-2 pi BW T)), radiation as a first difference, with a little noise; 150 ms of noise alone
// every second, so that the unvoiced path is exercised too.
std::vector<float> voice_like(double rate) {
  const auto n = static_cast<std::size_t>(kSignalSeconds * rate);
  std::vector<float> out(n);
  std::mt19937 rng(12345);
  std::normal_distribution<double> noise(0.0, 1.0);
  struct Resonator {
    double a, b, c, y1 = 0.0, y2 = 0.0;
    double step(double x) {
      const double y = a * x + b * y1 + c * y2;
      y2 = y1;
      y1 = y;
      return y;
    }
  };
  auto resonator = [rate](double f, double bw) {
    const double t = 1.0 / rate;
    const double c = -std::exp(-2.0 * std::numbers::pi * bw * t);
    const double b = 2.0 * std::exp(-std::numbers::pi * bw * t) * std::cos(2.0 * std::numbers::pi * f * t);
    return Resonator{1.0 - b - c, b, c};
  };
  Resonator r1 = resonator(700.0, 90.0);
  Resonator r2 = resonator(1200.0, 110.0);
  double phase = 0.0;
  double prev_pulse = 0.0;
  double prev_out = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    const double t = static_cast<double>(i) / rate;
    const bool voiced = std::fmod(t, 1.0) < 0.85;
    const double f0 = 150.0 * std::pow(2.0, 0.75 * std::sin(2.0 * std::numbers::pi * 0.23 * t)) *
                      (1.0 + 0.01 * std::sin(2.0 * std::numbers::pi * 5.5 * t));
    phase += f0 / rate;
    phase -= std::floor(phase);
    double pulse = 0.0;
    if (phase < 0.5) {
      pulse = 0.5 * (1.0 - std::cos(std::numbers::pi * phase / 0.5));
    } else if (phase < 0.75) {
      pulse = std::cos(std::numbers::pi * (phase - 0.5) / 0.5);
    }
    const double source = voiced ? (pulse - prev_pulse) : 0.0;
    prev_pulse = pulse;
    const double shaped = r2.step(r1.step(source));
    const double radiated = shaped - prev_out;
    prev_out = shaped;
    out[i] = static_cast<float>(0.5 * radiated + 0.002 * noise(rng));
  }
  float peak = 0.0f;
  for (float v : out) peak = std::max(peak, std::abs(v));
  if (peak > 0.0f) {
    for (float& v : out) v *= 0.5f / peak;
  }
  return out;
}

class CountingSink final : public FrameSink {
 public:
  void on_live(const LiveFrame& frame) override {
    ++frames;
    benchmark::DoNotOptimize(frame.f0_hz);
  }
  void on_settled(const SettledFrame& frame) override {
    ++frames;
    benchmark::DoNotOptimize(frame.f0_hz);
  }
  std::int64_t frames = 0;
};

void BM_PitchTrackerHop(benchmark::State& state) {
  const double rate = static_cast<double>(state.range(0));
  TrackerConfig config;
  config.sample_rate_hz = rate;
  config.hop_ms = kHopMs;
  PitchTracker tracker(config);
  const std::vector<float> signal = voice_like(rate);
  const double hop_exact = rate * kHopMs / 1000.0;
  CountingSink sink;

  // Warm up over one second so that the windows, resampler and settled lag are full before timing.
  std::size_t pos = 0;
  std::int64_t hop_index = 0;
  auto next_block = [&]() {
    // Hop boundaries at round(k * hop_exact): 220/221 alternate at 44.1 kHz. Wraps around the signal.
    auto start = static_cast<std::size_t>(std::llround(static_cast<double>(hop_index) * hop_exact));
    auto end = static_cast<std::size_t>(std::llround(static_cast<double>(hop_index + 1) * hop_exact));
    ++hop_index;
    const std::size_t len = end - start;
    if (pos + len > signal.size()) pos = 0;
    std::span<const float> block(signal.data() + pos, len);
    pos += len;
    return block;
  };
  for (int i = 0; i < 200; ++i) tracker.process(next_block(), sink);
  sink.frames = 0;

  for (auto _ : state) {
    tracker.process(next_block(), sink);
  }
  const double hop_seconds = kHopMs / 1000.0;
  state.counters["hop_time"] =
      benchmark::Counter(1.0, benchmark::Counter::kIsIterationInvariantRate | benchmark::Counter::kInvert);
  state.counters["rtf"] = benchmark::Counter(
      hop_seconds, benchmark::Counter::kIsIterationInvariantRate | benchmark::Counter::kInvert);
  const auto iterations = std::max<benchmark::IterationCount>(1, state.iterations());
  state.counters["frames"] = benchmark::Counter(static_cast<double>(sink.frames) / static_cast<double>(iterations));
  state.SetLabel("rate " + std::to_string(static_cast<int>(rate)) + " Hz, hop 5 ms");
}

BENCHMARK(BM_PitchTrackerHop)->Arg(16000)->Arg(44100)->Arg(48000)->Unit(benchmark::kMicrosecond);

}  // namespace

BENCHMARK_MAIN();
