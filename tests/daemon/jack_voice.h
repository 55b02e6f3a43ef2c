// jack_voice.h: the test voices that JACK players send (tests/daemon/jack_fixture.h and the standalone
// pitchwire_jack_player): steady vowels whose F0 is known exactly, from the dsp synthesizer.
//
// Thread contract: pure functions that allocate and take a fraction of a second; call them before a JACK
// client is activated, never from its process callback.
#pragma once

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <stdexcept>
#include <vector>

#include "pitchwire/dsp/voice_synth.h"

namespace pitchwire::test {

// The vowel [a] ("aa", Peterson & Barney 1952) from an adult male voice with neither jitter, shimmer nor
// aspiration noise, so that every glottal cycle is the same and the F0 is exactly the one asked for.
inline dsp::Script steady_vowel_script(const std::vector<double>& f0s_hz, double seconds_each) {
  dsp::Script script;
  script.voice = dsp::default_voice(dsp::VoiceType::male);
  script.voice.jitter_pct = 0.0;
  script.voice.shimmer_pct = 0.0;
  script.voice.aspiration = 0.0;
  for (const double f0 : f0s_hz) {
    dsp::Segment segment;
    segment.phone = dsp::Phone::aa;
    segment.duration_s = seconds_each;
    segment.f0_start_hz = f0;
    segment.f0_end_hz = f0;
    script.segments.push_back(segment);
  }
  return script;
}

// About `seconds` of a steady vowel at f0_hz, cut at glottal cycle starts so that it loops without a
// click: it starts after the voicing onset and spans the whole number of cycles (of those the render
// holds) whose length in samples is closest to an integer, so the seam is off by a small fraction of a
// sample. Peak at -3 dBFS.
inline std::vector<float> steady_vowel_loop(double f0_hz, double sample_rate_hz, double seconds = 1.5) {
  const double skip_s = 0.25;  // past the voicing onset ramp and the vocal tract's start-up
  const dsp::Rendered rendered =
      dsp::render(steady_vowel_script({f0_hz}, skip_s + seconds + 0.25), sample_rate_hz);
  const std::vector<double>& pulses = rendered.pulse_times_s;
  const auto first = std::lower_bound(pulses.begin(), pulses.end(), skip_s);
  if (first == pulses.end()) throw std::runtime_error("steady_vowel_loop: no glottal cycle after the onset");
  const double start_s = *first;
  const std::size_t first_index = static_cast<std::size_t>(first - pulses.begin());

  // Candidate ends: cycle starts between 80 % and 100 % of the wanted length.
  std::size_t best = 0;
  double best_error = 1.0;
  for (std::size_t i = first_index + 1; i < pulses.size(); ++i) {
    const double length = (pulses[i] - start_s) * sample_rate_hz;
    if (pulses[i] - start_s < 0.8 * seconds) continue;
    if (pulses[i] - start_s > seconds) break;
    const double error = std::abs(length - std::round(length));
    if (error < best_error) {
      best_error = error;
      best = i;
    }
  }
  if (best == 0) throw std::runtime_error("steady_vowel_loop: the render is shorter than the loop");
  const auto begin = static_cast<std::size_t>(std::lround(start_s * sample_rate_hz));
  const auto length = static_cast<std::size_t>(std::lround((pulses[best] - start_s) * sample_rate_hz));
  if (begin + length > rendered.samples.size()) throw std::runtime_error("steady_vowel_loop: loop past the end");
  return {rendered.samples.begin() + static_cast<std::ptrdiff_t>(begin),
          rendered.samples.begin() + static_cast<std::ptrdiff_t>(begin + length)};
}

// Steady vowels one after another, one per F0, each exactly frames_each samples long (the F0 changes at
// sample k * frames_each). Peak at -3 dBFS over the whole.
inline std::vector<float> vowel_steps(const std::vector<double>& f0s_hz, double sample_rate_hz,
                                      std::size_t frames_each) {
  const double seconds_each = static_cast<double>(frames_each) / sample_rate_hz;
  dsp::Rendered rendered = dsp::render(steady_vowel_script(f0s_hz, seconds_each), sample_rate_hz);
  rendered.samples.resize(frames_each * f0s_hz.size(), 0.0f);
  return std::move(rendered.samples);
}

}  // namespace pitchwire::test
