// Tests of the test-voice synthesizer: checks by construction that the audio and its truth agree.
// Sources: Rosenberg (1971) and Liljencrants & Fant (1985) glottal pulses, Klatt (1980) resonators,
// Peterson & Barney (1952) formants and F0 averages, Baken & Orlikoff (2000) jitter definition,
// Paul Kellet's pink filter.
#include "pitchwire/dsp/voice_synth.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <numbers>
#include <vector>

namespace pitchwire::dsp {
namespace {

constexpr double kPi = std::numbers::pi;

Segment seg(Phone p, double dur, double f0 = 0.0, double f0_end = 0.0) {
  Segment s;
  s.phone = p;
  s.duration_s = dur;
  s.f0_start_hz = f0;
  s.f0_end_hz = f0_end;
  return s;
}

Script steady_vowel(double f0, double seconds, double jitter_pct = 0.0) {
  Script s;
  s.voice = default_voice(VoiceType::male);
  s.voice.jitter_pct = jitter_pct;
  s.voice.shimmer_pct = 0.0;
  s.segments = {seg(Phone::pause, 0.2), seg(Phone::aa, seconds, f0), seg(Phone::pause, 0.2)};
  return s;
}

std::size_t pulses_in(const Rendered& r, double t0, double t1) {
  return static_cast<std::size_t>(std::count_if(r.pulse_times_s.begin(), r.pulse_times_s.end(),
                                                [&](double t) { return t >= t0 && t < t1; }));
}

// Lag of the highest normalised autocorrelation between min_lag and max_lag, over [i0, i1).
int best_lag(const std::vector<float>& x, std::size_t i0, std::size_t i1, int min_lag, int max_lag) {
  double best = -2.0;
  int best_l = 0;
  for (int l = min_lag; l <= max_lag; ++l) {
    double xy = 0.0, xx = 0.0, yy = 0.0;
    for (std::size_t i = i0; i + static_cast<std::size_t>(l) < i1; ++i) {
      const double a = x[i], b = x[i + static_cast<std::size_t>(l)];
      xy += a * b;
      xx += a * a;
      yy += b * b;
    }
    const double r = xy / std::sqrt(xx * yy + 1e-30);
    if (r > best) {
      best = r;
      best_l = l;
    }
  }
  return best_l;
}

// ---------------------------------------------------------------------------------------------------
// Glottal cycles by phase accumulation.

TEST(VoiceSynth, SteadyVowelAt200HzHas200PulsesPerSecond) {
  for (const auto model : {GlottalModel::rosenberg, GlottalModel::lf}) {
    for (const double jitter : {0.0, 1.0}) {
      SCOPED_TRACE(::testing::Message() << "model " << static_cast<int>(model) << " jitter " << jitter);
      Script s = steady_vowel(200.0, 1.0, jitter);
      s.voice.model = model;
      const Rendered r = render(s, 16000.0);
      // By construction: F0 integrates to 200 cycles over the 1 s vowel.
      EXPECT_NEAR(static_cast<double>(pulses_in(r, 0.2, 1.2)), 200.0, 1.0);
      EXPECT_EQ(pulses_in(r, 0.0, 0.2), 0u);
      EXPECT_EQ(pulses_in(r, 1.2, 2.0), 0u);
    }
  }
}

TEST(VoiceSynth, PulsesCountedInTheWaveformMatch) {
  // The radiated Rosenberg (1971) source has one sharp negative peak per cycle, at glottal closure.
  Script s = steady_vowel(200.0, 1.0);
  RenderOptions opt;
  opt.source_only = true;
  const Rendered r = render(s, 16000.0, opt);
  const std::vector<float>& x = r.samples;
  // Away from the 8 ms voicing ramps: 0.3..1.1 s holds 160 cycles.
  const auto i0 = static_cast<std::size_t>(0.3 * 16000), i1 = static_cast<std::size_t>(1.1 * 16000);
  const float lowest = *std::min_element(x.begin() + static_cast<std::ptrdiff_t>(i0), x.begin() + static_cast<std::ptrdiff_t>(i1));
  int peaks = 0;
  for (std::size_t i = i0; i < i1; ++i) {
    if (x[i] < 0.5f * lowest && x[i] <= x[i - 1] && x[i] < x[i + 1]) {
      ++peaks;
      // No delay through the decimation filter: closure comes Tp + Tn = 0.56 periods (2.8 ms) after the
      // cycle start, within a sample.
      const double t = static_cast<double>(i) / 16000.0;
      const auto next = std::upper_bound(r.pulse_times_s.begin(), r.pulse_times_s.end(), t);
      ASSERT_NE(next, r.pulse_times_s.begin());
      EXPECT_NEAR(t - *(next - 1), 0.0028, 1.0 / 16000.0);
    }
  }
  EXPECT_NEAR(peaks, 160, 1);
}

TEST(VoiceSynth, GlidePulsesFollowTheIntegralOfF0) {
  // A glide linear in cents from 100 to 200 Hz over 1 s: f(t) = 100 * 2^t, integral 100 / ln 2 = 144.3.
  Script s;
  s.voice = default_voice(VoiceType::male);
  s.voice.jitter_pct = 0.0;
  s.segments = {seg(Phone::pause, 0.1), seg(Phone::aa, 1.0, 100.0, 200.0), seg(Phone::pause, 0.1)};
  const Rendered r = render(s, 44100.0);
  EXPECT_NEAR(static_cast<double>(r.pulse_times_s.size()), 100.0 / std::log(2.0), 1.0);
  EXPECT_NEAR(r.truth_at(0.6), 100.0 * std::exp2(0.5), 0.01);
}

TEST(VoiceSynth, LocalJitterIsAsStated) {
  // Local jitter (Baken & Orlikoff 2000): mean |T_i - T_i+1| / mean T.
  Script s = steady_vowel(150.0, 4.0, 1.0);
  const Rendered r = render(s, 16000.0);
  std::vector<double> periods;
  for (std::size_t i = 1; i < r.pulse_times_s.size(); ++i) periods.push_back(r.pulse_times_s[i] - r.pulse_times_s[i - 1]);
  ASSERT_GT(periods.size(), 500u);
  double diff = 0.0, mean = 0.0;
  for (std::size_t i = 0; i < periods.size(); ++i) {
    mean += periods[i];
    if (i > 0) diff += std::abs(periods[i] - periods[i - 1]);
  }
  mean /= static_cast<double>(periods.size());
  diff /= static_cast<double>(periods.size() - 1);
  EXPECT_NEAR(100.0 * diff / mean, 1.0, 0.15);
  // Jitter perturbs periods; the mean F0 and the truth stay on the contour.
  EXPECT_NEAR(1.0 / mean, 150.0, 1.0);
  EXPECT_FLOAT_EQ(r.truth_at(1.0), 150.0f);
}

TEST(VoiceSynth, AudioPeriodicityMatchesTruth) {
  // The normalised autocorrelation of the rendered vowel peaks at the truth period, at every rate,
  // also for a 1 kHz note (no aliasing of the pulses thanks to the oversampled rendering).
  for (const double fs : {16000.0, 44100.0, 48000.0}) {
    for (const double f0 : {200.0, 1000.0}) {
      SCOPED_TRACE(::testing::Message() << "fs " << fs << " f0 " << f0);
      Script s = steady_vowel(f0, 0.6);
      if (f0 > 500.0) s.voice = default_voice(VoiceType::soprano);
      s.voice.jitter_pct = 0.0;
      s.voice.shimmer_pct = 0.0;
      const Rendered r = render(s, fs);
      const double period = fs / f0;
      const int lag = best_lag(r.samples, static_cast<std::size_t>(0.35 * fs), static_cast<std::size_t>(0.55 * fs),
                               static_cast<int>(period * 0.6), static_cast<int>(period * 1.4));
      EXPECT_NEAR(lag, period, 1.0);
    }
  }
}

// ---------------------------------------------------------------------------------------------------
// Truth.

TEST(VoiceSynth, TruthIsExactlyZeroInPausesAndUnvoicedConsonants) {
  Script s;
  s.voice = default_voice(VoiceType::female);
  s.segments = {seg(Phone::pause, 0.3), seg(Phone::s, 0.12),  seg(Phone::aa, 0.2, 210.0), seg(Phone::sh, 0.1),
                seg(Phone::t, 0.08),    seg(Phone::iy, 0.2),  seg(Phone::f, 0.1),         seg(Phone::h, 0.07),
                seg(Phone::eh, 0.15),   seg(Phone::p, 0.09),  seg(Phone::pause, 0.3)};
  s.f0_contour = {{0.0, 230.0}, {2.0, 190.0}};
  const Rendered r = render(s, 16000.0);
  double t = 0.0;
  for (const Segment& g : s.segments) {
    const double t0 = t, t1 = t + g.duration_s;
    t = t1;
    for (const TruthSample& ts : r.truth) {
      if (ts.time_s < t0 || ts.time_s >= t1) continue;
      if (!is_voiced(g.phone)) {
        ASSERT_EQ(ts.f0_hz, 0.0f) << phone_name(g.phone) << " at " << ts.time_s;
      } else if (ts.time_s < t1 - 0.006) {  // the last cycle ends at most one period (< 6 ms) early
        ASSERT_GT(ts.f0_hz, 0.0f) << phone_name(g.phone) << " at " << ts.time_s;
      }
    }
  }
  // Voicing starts with a cycle at the segment start: the vowel's first truth sample is voiced.
  EXPECT_FLOAT_EQ(r.truth_at(0.42), 210.0f);
  EXPECT_EQ(r.truth_at(0.419), 0.0f);
  // The own F0 of the first vowel, the contour for the second (piecewise linear in cents).
  EXPECT_FLOAT_EQ(r.truth_at(0.5), 210.0f);
  const double t_iy = 0.3 + 0.12 + 0.2 + 0.1 + 0.08 + 0.1;
  EXPECT_NEAR(r.truth_at(t_iy), 230.0 * std::pow(190.0 / 230.0, t_iy / 2.0), 0.01);
  // Truth grid: every 1 ms from 0 over the whole file.
  ASSERT_EQ(r.truth.size(), static_cast<std::size_t>(std::ceil(r.duration_s() * 1000.0 - 1e-9)));
  for (std::size_t k = 0; k < r.truth.size(); ++k) ASSERT_DOUBLE_EQ(r.truth[k].time_s, static_cast<double>(k) / 1000.0);
  // No glottal cycle outside the voiced truth.
  for (double p : r.pulse_times_s) ASSERT_GT(r.truth_at(p + 0.0005), 0.0f) << p;
}

TEST(VoiceSynth, VoicedObstruentsCarryF0WithASmallDip) {
  Script s;
  s.voice = default_voice(VoiceType::male);
  s.segments = {seg(Phone::pause, 0.2), seg(Phone::aa, 0.2), seg(Phone::z, 0.1), seg(Phone::aa, 0.2),
                seg(Phone::v, 0.1),     seg(Phone::iy, 0.2), seg(Phone::pause, 0.2)};
  s.f0_contour = {{0.0, 120.0}};
  const Rendered r = render(s, 16000.0);
  EXPECT_FLOAT_EQ(r.truth_at(0.3), 120.0f);
  const double mid_z = r.truth_at(0.45), mid_v = r.truth_at(0.75);
  // z and v are voiced (common practice): F0 present, dipping by 0.7 semitone at their centre.
  EXPECT_NEAR(12.0 * std::log2(mid_z / 120.0), -0.7, 0.02);
  EXPECT_NEAR(12.0 * std::log2(mid_v / 120.0), -0.7, 0.02);
  EXPECT_FLOAT_EQ(r.truth_at(0.55), 120.0f);
}

TEST(VoiceSynth, VibratoIsInTheTruth) {
  Script s;
  s.voice = default_voice(VoiceType::soprano);
  Segment note = seg(Phone::aa, 2.0, 880.0);
  note.vibrato_rate_hz = 5.5;
  note.vibrato_cents = 80.0;
  s.segments = {seg(Phone::pause, 0.3), note, seg(Phone::pause, 0.3)};
  const Rendered r = render(s, 48000.0);
  double lo = 1e9, hi = 0.0;
  for (const auto& ts : r.truth) {
    if (ts.f0_hz > 0.0f) {
      lo = std::min(lo, static_cast<double>(ts.f0_hz));
      hi = std::max(hi, static_cast<double>(ts.f0_hz));
    }
  }
  EXPECT_NEAR(1200.0 * std::log2(hi / 880.0), 80.0, 0.5);
  EXPECT_NEAR(1200.0 * std::log2(lo / 880.0), -80.0, 0.5);
}

TEST(VoiceSynth, TruthDoesNotDependOnTheOutputRate) {
  const Script s = make_item_script(ItemKind::speech, VoiceType::male, 7);
  const Rendered a = render(s, 16000.0), b = render(s, 44100.0);
  ASSERT_EQ(a.truth.size(), b.truth.size());
  std::size_t differ = 0;
  for (std::size_t k = 0; k < a.truth.size(); ++k) {
    if (a.truth[k].f0_hz != b.truth[k].f0_hz) ++differ;
  }
  // Only the end of a voiced stretch (its last cycle) may move by a fraction of a sample.
  EXPECT_LE(differ, 3u);
}

// ---------------------------------------------------------------------------------------------------
// Building blocks.

TEST(KlattResonator, UnityGainAtDcAndPeakNearTheFormant) {
  struct Case {
    double f, bw, fs;
  };
  for (const Case c : {Case{500.0, 60.0, 16000.0}, Case{1500.0, 90.0, 44100.0}, Case{2500.0, 150.0, 48000.0},
                       Case{730.0, 80.0, 192000.0}}) {
    SCOPED_TRACE(::testing::Message() << "F " << c.f << " BW " << c.bw << " fs " << c.fs);
    KlattResonator res;
    res.set(c.f, c.bw, c.fs);
    // Klatt (1980): A = 1 - B - C, so H(1) = A / (1 - B - C) = 1.
    EXPECT_NEAR(res.a() + res.b() + res.c(), 1.0, 1e-12);
    EXPECT_NEAR(res.gain_at(0.0, c.fs), 1.0, 1e-9);
    double y = 0.0;
    for (int i = 0; i < 200000; ++i) y = res.process(1.0);
    EXPECT_NEAR(y, 1.0, 1e-6);
    // Peak of the magnitude response within 2 % of F.
    double best_f = 0.0, best_g = 0.0;
    for (double f = 1.0; f < 0.5 * c.fs; f += 1.0) {
      const double g = res.gain_at(f, c.fs);
      if (g > best_g) {
        best_g = g;
        best_f = f;
      }
    }
    EXPECT_NEAR(best_f, c.f, 0.02 * c.f);
    // gain_at() describes the difference equation: a steady sine at F comes out with that gain.
    res.reset();
    double peak = 0.0;
    const int n = static_cast<int>(c.fs);
    for (int i = 0; i < n; ++i) {
      const double out = res.process(std::sin(2.0 * kPi * c.f * i / c.fs));
      if (i > n / 2) peak = std::max(peak, std::abs(out));
    }
    EXPECT_NEAR(peak / res.gain_at(c.f, c.fs), 1.0, 1e-3);
  }
}

TEST(GlottalPulse, ShapesStartAndEndClosed) {
  const GlottalPulse ros = GlottalPulse::rosenberg(0.4, 0.16);
  const GlottalPulse lf = GlottalPulse::lf(0.4, 0.56, 0.024);
  for (const GlottalPulse* g : {&ros, &lf}) {
    EXPECT_NEAR(g->flow(0.0), 0.0, 1e-9);
    EXPECT_NEAR(g->flow(1.0), 0.0, 1e-6);
    double peak = 0.0, at = 0.0;
    for (int i = 0; i <= 1000; ++i) {
      const double v = g->flow(i / 1000.0);
      ASSERT_GE(v, 0.0);
      if (v > peak) {
        peak = v;
        at = i / 1000.0;
      }
    }
    EXPECT_NEAR(peak, 1.0, 1e-3);
    EXPECT_NEAR(at, 0.4, 0.02);  // flow peaks at Tp (Rosenberg 1971) or tp (LF 1985)
  }
  // Rosenberg: closed after Tp + Tn.
  EXPECT_EQ(ros.flow(0.6), 0.0);
  EXPECT_THROW(GlottalPulse::rosenberg(0.8, 0.4), std::invalid_argument);
}

TEST(SynthMixing, ReachesTheRequestedSnrWithinATenthOfADecibel) {
  const Script s = make_item_script(ItemKind::speech, VoiceType::female, 3);
  const Rendered target = render(s, 16000.0);
  const std::size_t n = target.samples.size();
  const Rendered other = render(make_item_script(ItemKind::speech, VoiceType::male, 4), 16000.0);
  const std::vector<std::vector<float>> interferers = {white_noise(n, 1), pink_noise(n, 2),
                                                       mains_hum(n, 16000.0, 50.0, 3), other.samples};
  for (const auto& noise : interferers) {
    for (const double snr : {20.0, 10.0, 5.0}) {
      std::vector<float> mix = target.samples;
      mix_at_snr(mix, noise, snr);
      std::vector<float> added(n);
      for (std::size_t i = 0; i < n; ++i) added[i] = mix[i] - target.samples[i];
      const double measured = 10.0 * std::log10(mean_power(target.samples) / mean_power(added));
      EXPECT_NEAR(measured, snr, 0.1);
    }
  }
  std::vector<float> silent(100, 0.0f);
  EXPECT_THROW(mix_at_snr(silent, white_noise(100, 1), 10.0), std::invalid_argument);
}

TEST(SynthNoise, UnitRmsAndPinkSlope) {
  const std::size_t n = 1 << 18;
  const double fs = 44100.0;
  for (const auto& x : {white_noise(n, 5), pink_noise(n, 6), mains_hum(n, fs, 60.0, 7)}) {
    EXPECT_NEAR(mean_power(x), 1.0, 1e-3);
  }
  // Pink (Kellet's filter): power density falls 3 dB per octave. Averaged Hann-windowed DFT bins.
  const std::vector<float> pink = pink_noise(n, 8);
  const std::size_t block = 4096;
  auto density_db = [&](double f) {
    double acc = 0.0;
    for (std::size_t b0 = 0; b0 + block <= n; b0 += block) {
      for (int dk = -3; dk <= 3; ++dk) {
        const double fk = (std::round(f * block / fs) + dk) / block;
        double re = 0.0, im = 0.0;
        for (std::size_t i = 0; i < block; ++i) {
          const double w = 0.5 - 0.5 * std::cos(2.0 * kPi * static_cast<double>(i) / block);
          re += w * pink[b0 + i] * std::cos(2.0 * kPi * fk * static_cast<double>(i));
          im += w * pink[b0 + i] * std::sin(2.0 * kPi * fk * static_cast<double>(i));
        }
        acc += re * re + im * im;
      }
    }
    return 10.0 * std::log10(acc);
  };
  const double d250 = density_db(250.0), d1000 = density_db(1000.0), d4000 = density_db(4000.0);
  EXPECT_NEAR(d250 - d1000, 6.0, 1.0);   // two octaves
  EXPECT_NEAR(d1000 - d4000, 6.0, 1.0);
}

TEST(SynthNormalisation, PeakAtTheRequestedLevel) {
  const Script s = make_item_script(ItemKind::sustained, VoiceType::child, 11);
  for (const double dbfs : {-3.0, -30.0}) {
    RenderOptions opt;
    opt.peak_dbfs = dbfs;
    const Rendered r = render(s, 48000.0, opt);
    float peak = 0.0f;
    for (float v : r.samples) peak = std::max(peak, std::abs(v));
    EXPECT_NEAR(20.0 * std::log10(peak), dbfs, 1e-4);
  }
}

// ---------------------------------------------------------------------------------------------------
// Determinism and corpus scripts.

TEST(VoiceSynth, DeterministicForASeed) {
  const Script a = make_item_script(ItemKind::speech, VoiceType::female, 42);
  const Script b = make_item_script(ItemKind::speech, VoiceType::female, 42);
  ASSERT_EQ(a.segments.size(), b.segments.size());
  RenderOptions opt;
  opt.seed = 9;
  const Rendered ra = render(a, 16000.0, opt), rb = render(b, 16000.0, opt);
  ASSERT_EQ(ra.samples.size(), rb.samples.size());
  EXPECT_TRUE(std::equal(ra.samples.begin(), ra.samples.end(), rb.samples.begin()));
  EXPECT_EQ(ra.pulse_times_s, rb.pulse_times_s);
  // Another render seed: other jitter and noise, the same truth.
  opt.seed = 10;
  const Rendered rc = render(a, 16000.0, opt);
  EXPECT_FALSE(std::equal(ra.samples.begin(), ra.samples.end(), rc.samples.begin()));
  // Another script seed: another text and contour.
  const Script d = make_item_script(ItemKind::speech, VoiceType::female, 43);
  const Rendered rd = render(d, 16000.0, opt);
  EXPECT_TRUE(ra.truth.size() != rd.truth.size() ||
              !std::equal(ra.truth.begin(), ra.truth.end(), rd.truth.begin(),
                          [](const TruthSample& x, const TruthSample& y) { return x.f0_hz == y.f0_hz; }));
  EXPECT_EQ(white_noise(64, 1), white_noise(64, 1));
  EXPECT_NE(white_noise(64, 1), white_noise(64, 2));
  Rng r1(5), r2(5);
  for (int i = 0; i < 100; ++i) ASSERT_EQ(r1.normal(), r2.normal());
}

TEST(CorpusItems, DurationsLeadInsAndRanges) {
  const std::vector<std::pair<ItemKind, std::vector<VoiceType>>> plan = {
      {ItemKind::speech, {VoiceType::low_male, VoiceType::male, VoiceType::female, VoiceType::child}},
      {ItemKind::sustained, {VoiceType::male, VoiceType::female}},
      {ItemKind::breathy, {VoiceType::female}},
      {ItemKind::glide, {VoiceType::male, VoiceType::child}},
      {ItemKind::sung, {VoiceType::female, VoiceType::soprano}},
      {ItemKind::fry, {VoiceType::low_male}}};
  for (const auto& [kind, voices] : plan) {
    for (const VoiceType voice : voices) {
      for (std::uint64_t seed = 1; seed <= 6; ++seed) {
        SCOPED_TRACE(::testing::Message() << item_kind_name(kind) << " " << voice_type_name(voice) << " seed " << seed);
        const Script s = make_item_script(kind, voice, seed);
        EXPECT_GE(s.duration_s(), 2.0);
        EXPECT_LE(s.duration_s(), 6.0);
        ASSERT_FALSE(s.segments.empty());
        EXPECT_EQ(s.segments.front().phone, Phone::pause);
        EXPECT_GE(s.segments.front().duration_s, 0.4);
        if (seed > 1) continue;  // render one per kind and voice
        const Rendered r = render(s, 16000.0);
        double lo = 1e9, hi = 0.0;
        std::size_t voiced = 0;
        for (const auto& ts : r.truth) {
          if (ts.f0_hz > 0.0f) {
            ++voiced;
            lo = std::min(lo, static_cast<double>(ts.f0_hz));
            hi = std::max(hi, static_cast<double>(ts.f0_hz));
          }
        }
        EXPECT_GT(voiced, r.truth.size() / 5);
        EXPECT_LT(voiced, r.truth.size());
        if (voice == VoiceType::low_male && kind == ItemKind::speech) {
          EXPECT_GE(lo, 55.0);
          EXPECT_LE(hi, 115.0);
        }
        if (kind == ItemKind::fry) {
          EXPECT_GE(lo, 45.0);
          EXPECT_LE(hi, 80.0);
        }
        if (voice == VoiceType::soprano) {
          EXPECT_LE(hi, 1150.0);
        }
      }
    }
  }
}

TEST(CorpusItems, SpeechHasUnvoicedConsonants) {
  const Script s = make_item_script(ItemKind::speech, VoiceType::male, 5);
  std::size_t unvoiced = 0;
  for (const auto& g : s.segments) {
    if (g.phone != Phone::pause && !is_voiced(g.phone)) ++unvoiced;
  }
  EXPECT_GE(unvoiced, 2u);
}

TEST(AppendPhrase, ParsesTheNotationAndRejectsUnknownPhones) {
  Script s;
  Rng rng(1);
  Prosody p;
  append_phrase(s, "g *uh d | iy v n ih ng , s *ih ng er z", p, rng);
  // 13 phones and one pause.
  EXPECT_EQ(s.segments.size(), 14u);
  EXPECT_FALSE(s.f0_contour.empty());
  EXPECT_THROW(append_phrase(s, "g xx d", p, rng), std::invalid_argument);
  EXPECT_EQ(phone_from_name("sh"), Phone::sh);
  EXPECT_FALSE(phone_from_name("q").has_value());
}

// ---------------------------------------------------------------------------------------------------
// The demo session.

TEST(DemoSession, LastsThirtyToFortySecondsWithVoicedAndUnvoicedParts) {
  const Rendered r = render_demo_session(16000.0);
  EXPECT_GE(r.duration_s(), 30.0);
  EXPECT_LE(r.duration_s(), 40.0);
  std::size_t voiced = 0, changes = 0;
  double hi = 0.0;
  for (std::size_t k = 0; k < r.truth.size(); ++k) {
    if (r.truth[k].f0_hz > 0.0f) ++voiced;
    if (k > 0 && (r.truth[k].f0_hz > 0.0f) != (r.truth[k - 1].f0_hz > 0.0f)) ++changes;
    hi = std::max(hi, static_cast<double>(r.truth[k].f0_hz));
  }
  const double fraction = static_cast<double>(voiced) / static_cast<double>(r.truth.size());
  EXPECT_GT(fraction, 0.4);
  EXPECT_LT(fraction, 0.85);
  EXPECT_GT(changes, 60u);  // many voicing onsets and offsets: consonants and pauses
  EXPECT_EQ(r.truth.front().f0_hz, 0.0f);  // starts with a pause
  EXPECT_GT(hi, 659.0);                    // the sung E5 with vibrato
}

}  // namespace
}  // namespace pitchwire::dsp
