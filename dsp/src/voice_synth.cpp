// voice_synth.cpp: the test-voice synthesizer. See voice_synth.h for the model and the truth contract.
//
// Values marked "(memory)" were recalled, not read from the cited source; values marked "(our choice)"
// are design choices of this file, not taken from a source.
#include "pitchwire/dsp/voice_synth.h"

#include <algorithm>
#include <cmath>
#include <numbers>
#include <stdexcept>
#include <string>

namespace pitchwire::dsp {
namespace {

constexpr double kPi = std::numbers::pi;

// Levels, noise densities and the radiation gain are defined at this rate, so the same script sounds
// the same at every output rate (within the output band).
constexpr double kRefRate = 16000.0;
// Internal rate: at least this, an integer multiple of the output rate.
constexpr double kMinInternalRate = 176400.0;
// The source amplitude is scaled by kRefF0 / F0 per cycle so that the radiated level (the flow
// derivative) does not grow with F0 (our choice).
constexpr double kRefF0 = 120.0;
// For independent normal draws with standard deviation s, E|x_i - x_i+1| = 2 s / sqrt(pi): converts
// a stated local jitter or shimmer (Baken & Orlikoff 2000, mean absolute difference of consecutive
// cycles) into the standard deviation of the per-cycle draw.
constexpr double kMeanAbsDiffPerSigma = 1.1283791670955126;  // 2 / sqrt(pi)
// Microprosody: F0 dips briefly at voiced obstruents (common practice); depth in semitones (our choice).
constexpr double kObstruentDipSt = 0.7;

// Frication levels are set relative to kVowelRms, a level near the raw model RMS of vowels (a male [a] at
// 120 Hz renders at about 0.08).
// Calibrated by rendering (our choice of relative levels): re a male [a], /s/ and /sh/ about 15 dB,
// /h/ about 16 dB and /f/ about 25 dB below.
constexpr double kVowelRms = 0.06;
constexpr double kAspirationGain = 0.21;  // aspiration = 1 gives harmonics-to-noise near 0 dB
constexpr double kHGain = 0.024;           // /h/ and stop aspiration into the vocal tract

double db_to_lin(double db) { return std::pow(10.0, db / 20.0); }

// ---------------------------------------------------------------------------------------------------
// Phone table.

enum class Cls { pause, vowel, sonorant, voiced_fric, voiceless_fric, aspirate, voiceless_stop, voiced_stop };
enum class Noise { none, s, sh, f, burst_p, burst_t, burst_k };
constexpr std::size_t kNoiseChannels = 7;

struct PhoneInfo {
  Phone phone;
  std::string_view name;
  Cls cls;
  double f1, f2, f3;  // male formants, Hz
  double voice_db;    // level of the voiced source in this phone
  double dur_s;       // typical duration in running speech (our choice, from common practice)
  Noise noise;
};

// Vowels: Peterson & Barney (1952) averages for men. [ɑ] 730/1090/2440, [i] 270/2290/3010 and [u]
// 300/870/2240 as read (Peterson & Barney 1952); the other seven vowels (memory). Sonorants and voiced
// obstruents: rough murmur and voice-bar formants (our choice, not from a source; the cascade has no
// anti-resonances for nasals).
constexpr std::array<PhoneInfo, 30> kPhones = {{
    {Phone::pause, "pause", Cls::pause, 500, 1500, 2500, 0.0, 0.10, Noise::none},
    {Phone::iy, "iy", Cls::vowel, 270, 2290, 3010, 0.0, 0.100, Noise::none},
    {Phone::ih, "ih", Cls::vowel, 390, 1990, 2550, 0.0, 0.075, Noise::none},
    {Phone::eh, "eh", Cls::vowel, 530, 1840, 2480, 0.0, 0.085, Noise::none},
    {Phone::ae, "ae", Cls::vowel, 660, 1720, 2410, 0.0, 0.120, Noise::none},
    {Phone::aa, "aa", Cls::vowel, 730, 1090, 2440, 0.0, 0.120, Noise::none},
    {Phone::ao, "ao", Cls::vowel, 570, 840, 2410, 0.0, 0.115, Noise::none},
    {Phone::uh, "uh", Cls::vowel, 440, 1020, 2240, 0.0, 0.075, Noise::none},
    {Phone::uw, "uw", Cls::vowel, 300, 870, 2240, 0.0, 0.100, Noise::none},
    {Phone::ah, "ah", Cls::vowel, 640, 1190, 2390, 0.0, 0.080, Noise::none},
    {Phone::er, "er", Cls::vowel, 490, 1350, 1690, 0.0, 0.100, Noise::none},
    {Phone::m, "m", Cls::sonorant, 250, 1000, 2200, -8.0, 0.065, Noise::none},
    {Phone::n, "n", Cls::sonorant, 250, 1600, 2600, -8.0, 0.060, Noise::none},
    {Phone::ng, "ng", Cls::sonorant, 250, 2000, 2700, -8.0, 0.070, Noise::none},
    {Phone::l, "l", Cls::sonorant, 360, 1300, 2700, -4.0, 0.055, Noise::none},
    {Phone::r, "r", Cls::sonorant, 420, 1300, 1600, -4.0, 0.055, Noise::none},
    {Phone::w, "w", Cls::sonorant, 300, 700, 2200, -5.0, 0.050, Noise::none},
    {Phone::y, "y", Cls::sonorant, 280, 2200, 3000, -5.0, 0.050, Noise::none},
    {Phone::z, "z", Cls::voiced_fric, 250, 1700, 2600, -14.0, 0.075, Noise::s},
    {Phone::v, "v", Cls::voiced_fric, 250, 1100, 2300, -14.0, 0.065, Noise::f},
    {Phone::s, "s", Cls::voiceless_fric, 500, 1500, 2500, 0.0, 0.105, Noise::s},
    {Phone::sh, "sh", Cls::voiceless_fric, 500, 1500, 2500, 0.0, 0.110, Noise::sh},
    {Phone::f, "f", Cls::voiceless_fric, 500, 1500, 2500, 0.0, 0.095, Noise::f},
    {Phone::h, "h", Cls::aspirate, 500, 1500, 2500, 0.0, 0.065, Noise::none},
    {Phone::p, "p", Cls::voiceless_stop, 500, 1500, 2500, 0.0, 0.090, Noise::burst_p},
    {Phone::t, "t", Cls::voiceless_stop, 500, 1500, 2500, 0.0, 0.085, Noise::burst_t},
    {Phone::k, "k", Cls::voiceless_stop, 500, 1500, 2500, 0.0, 0.090, Noise::burst_k},
    {Phone::b, "b", Cls::voiced_stop, 500, 1500, 2500, 0.0, 0.070, Noise::burst_p},
    {Phone::d, "d", Cls::voiced_stop, 500, 1500, 2500, 0.0, 0.065, Noise::burst_t},
    {Phone::g, "g", Cls::voiced_stop, 500, 1500, 2500, 0.0, 0.070, Noise::burst_k},
}};

const PhoneInfo& info(Phone p) { return kPhones[static_cast<std::size_t>(p)]; }

// Frication channel levels (dB re kVowelRms) and stop timing (our choice).
double noise_level(Noise n) {
  switch (n) {
    case Noise::s: return kVowelRms * db_to_lin(-12.0);
    case Noise::sh: return kVowelRms * db_to_lin(-11.0);
    case Noise::f: return kVowelRms * db_to_lin(-22.0);
    case Noise::burst_p: return kVowelRms * db_to_lin(-4.0);
    case Noise::burst_t: return kVowelRms * db_to_lin(-2.0);
    case Noise::burst_k: return kVowelRms * db_to_lin(-3.0);
    case Noise::none: break;
  }
  return 0.0;
}
constexpr double kBurstS = 0.012;           // stop burst length
constexpr double kBurstDecayS = 0.004;      // burst envelope time constant
constexpr double kStopAspirationS = 0.030;  // aspiration after a voiceless stop's burst
constexpr double kFricRampS = 0.020;        // fricative onset and offset ramps
constexpr double kVoiceRampS = 0.008;       // voicing onset and offset ramps

// Raised-cosine ramp: 0 at x = 0, 1 at x >= len.
double ramp(double x, double len) {
  if (len <= 0.0 || x >= len) return 1.0;
  if (x <= 0.0) return 0.0;
  return 0.5 - 0.5 * std::cos(kPi * x / len);
}

// ---------------------------------------------------------------------------------------------------
// Small filters used for noise shaping.

struct OnePole {
  double a = 0.0;
  double y = 0.0;
  void set(double fc_hz, double fs) { a = std::exp(-2.0 * kPi * fc_hz / fs); }
  double lowpass(double x) {
    y = (1.0 - a) * x + a * y;
    return y;
  }
  double highpass(double x) { return x - lowpass(x); }
};

// Frication noise shaping: high-passes, one Klatt resonator, a gentle low-pass; normalised so that
// noise with the reference density (unit variance at kRefRate) comes out with unit power (our choice
// of shapes: /s/ peak near 5.5 kHz, /sh/ near 2.7 kHz, /f/ broad).
class NoiseChain {
 public:
  NoiseChain() = default;
  NoiseChain(double hp_hz, int hp_order, double res_hz, double res_bw_hz, double fs) : hp_order_(hp_order) {
    for (auto& h : hp_) h.set(hp_hz, fs);
    res_.set(res_hz, res_bw_hz, fs);
    for (auto& l : lp_) l.set(9000.0, fs);
    // Unit output power for input of variance fs / kRefRate: sum of the squared impulse response.
    NoiseChain probe = *this;
    double energy = 0.0;
    const auto n = static_cast<std::size_t>(0.1 * fs);
    for (std::size_t i = 0; i < n; ++i) {
      const double y = probe.raw(i == 0 ? 1.0 : 0.0);
      energy += y * y;
    }
    norm_ = 1.0 / std::sqrt(std::max(energy * fs / kRefRate, 1e-30));
  }
  double process(double x) { return norm_ * raw(x); }

 private:
  double raw(double x) {
    for (int i = 0; i < hp_order_; ++i) x = hp_[static_cast<std::size_t>(i)].highpass(x);
    x = res_.process(x);
    for (auto& l : lp_) x = l.lowpass(x);
    return x;
  }
  int hp_order_ = 0;
  std::array<OnePole, 2> hp_{};
  KlattResonator res_;
  std::array<OnePole, 2> lp_{};
  double norm_ = 1.0;
};

// ---------------------------------------------------------------------------------------------------
// Decimation: Kaiser-windowed sinc low-pass, cutoff at 0.45 of the output rate, evaluated at every K-th
// input sample. Kaiser's (1974) design formulas (memory): beta = 0.1102 (A - 8.7) and length
// (A - 8) / (2.285 dw) for a stopband of A dB and a transition width dw (radians per sample); A = 90.
// Symmetric and centred, so the output has no delay.

double bessel_i0(double x) {
  double sum = 1.0, term = 1.0;
  for (int k = 1; k < 60; ++k) {
    term *= (x / (2.0 * k)) * (x / (2.0 * k));
    sum += term;
    if (term < 1e-17 * sum) break;
  }
  return sum;
}

std::vector<float> decimate(const std::vector<float>& x, int factor, std::size_t n_out) {
  const double attenuation_db = 90.0;
  const double beta = 0.1102 * (attenuation_db - 8.7);
  const double transition = 0.1 / factor;  // full transition width, cycles per input sample
  const double taps = (attenuation_db - 8.0) / (2.285 * 2.0 * kPi * transition);
  const int half = std::max(4, static_cast<int>(std::ceil(taps / 2.0)));
  const double fc = 0.45 / factor;
  std::vector<double> h(static_cast<std::size_t>(2 * half + 1));
  double sum = 0.0;
  for (int j = -half; j <= half; ++j) {
    const double r = static_cast<double>(j) / half;
    const double w = bessel_i0(beta * std::sqrt(std::max(0.0, 1.0 - r * r))) / bessel_i0(beta);
    const double arg = 2.0 * fc * j;
    const double sinc = j == 0 ? 1.0 : std::sin(kPi * arg) / (kPi * arg);
    const double v = 2.0 * fc * sinc * w;
    h[static_cast<std::size_t>(j + half)] = v;
    sum += v;
  }
  for (auto& v : h) v /= sum;  // unity gain at DC
  std::vector<float> y(n_out);
  const auto n_in = static_cast<std::ptrdiff_t>(x.size());
  for (std::size_t m = 0; m < n_out; ++m) {
    const auto centre = static_cast<std::ptrdiff_t>(m) * factor;
    const std::ptrdiff_t lo = std::max<std::ptrdiff_t>(-half, -centre);
    const std::ptrdiff_t hi = std::min<std::ptrdiff_t>(half, n_in - 1 - centre);
    double acc = 0.0;
    for (std::ptrdiff_t j = lo; j <= hi; ++j) {
      acc += h[static_cast<std::size_t>(j + half)] * static_cast<double>(x[static_cast<std::size_t>(centre + j)]);
    }
    y[m] = static_cast<float>(acc);
  }
  return y;
}

// ---------------------------------------------------------------------------------------------------
// Compiled script.

struct SegInfo {
  const Segment* seg = nullptr;
  const PhoneInfo* phone = nullptr;
  double t0 = 0.0, t1 = 0.0;
  std::array<Formant, 5> formants{};
  double voice_gain = 1.0;  // linear; unvoiced segments carry the next voiced segment's gain
  bool voiced = false;
};

struct Run {  // a stretch of consecutive voiced segments
  std::size_t first = 0, last = 0;  // segment indices
  double start = 0.0;               // first cycle starts here (the first segment's start)
  double stop = 0.0;                // end of the last complete cycle
  double nominal_end = 0.0;
};

struct Pulse {
  double t0, t1;  // cycle start and end
  double amp;     // shimmer and level factor
};

struct PulseParams {
  double open_fraction, close_fraction;
  double jitter_pct, shimmer_pct;
  double alternation;  // fry: alternate cycles longer/shorter by this fraction, and weaker
};

PulseParams pulse_params(const VoiceSpec& v) {
  const VoiceSpec def = default_voice(v.type);
  PulseParams p{def.open_fraction, def.close_fraction, v.jitter_pct, v.shimmer_pct, 0.0};
  if (v.fry) {
    // Vocal fry: short open phase, long closed phase, irregular and alternating cycles (common
    // practice; values our choice).
    p.open_fraction = 0.25;
    p.close_fraction = 0.08;
    p.jitter_pct = std::max(v.jitter_pct, 6.0);
    p.shimmer_pct = std::max(v.shimmer_pct, 15.0);
    p.alternation = 0.03;
  }
  if (v.open_fraction > 0.0) p.open_fraction = v.open_fraction;
  if (v.close_fraction > 0.0) p.close_fraction = v.close_fraction;
  return p;
}

GlottalPulse make_pulse(const VoiceSpec& v, const PulseParams& p) {
  if (v.model == GlottalModel::lf) {
    // te from the open and closing fractions; the return-phase constant ta grows with the closing
    // fraction (our choice: 0.024 for a modal male voice, where Tn = 0.16).
    const double te = std::min(0.95, p.open_fraction + p.close_fraction);
    const double ta = std::clamp(0.15 * p.close_fraction, 0.005, 0.5 * (1.0 - te));
    return GlottalPulse::lf(p.open_fraction, te, ta);
  }
  return GlottalPulse::rosenberg(p.open_fraction, p.close_fraction);
}

class F0Eval {
 public:
  F0Eval(const Script& script, const std::vector<SegInfo>& segs) : segs_(segs) {
    for (const auto& pt : script.f0_contour) {
      if (!(pt.f0_hz > 0.0)) throw std::invalid_argument("voice_synth: f0_contour point with F0 <= 0");
      times_.push_back(pt.time_s);
      logs_.push_back(std::log2(pt.f0_hz));
    }
    for (std::size_t i = 1; i < times_.size(); ++i) {
      if (times_[i] < times_[i - 1]) throw std::invalid_argument("voice_synth: f0_contour times must ascend");
    }
  }

  // F0 of voiced segment i at time t: its own glide or the contour, with vibrato and obstruent dip.
  [[nodiscard]] double at(std::size_t i, double t) const {
    const SegInfo& s = segs_[i];
    const Segment& seg = *s.seg;
    const double dur = s.t1 - s.t0;
    const double u = dur > 0.0 ? std::clamp((t - s.t0) / dur, 0.0, 1.0) : 0.0;
    double log_f;
    if (seg.f0_start_hz > 0.0) {
      const double a = std::log2(seg.f0_start_hz);
      const double b = seg.f0_end_hz > 0.0 ? std::log2(seg.f0_end_hz) : a;
      const double w = seg.glide == GlideShape::smooth ? 0.5 - 0.5 * std::cos(kPi * u) : u;
      log_f = a + (b - a) * w;
    } else {
      log_f = contour_log2(t);
    }
    if (seg.vibrato_rate_hz > 0.0 && seg.vibrato_cents > 0.0) {
      const double tau = t - s.t0;
      const double depth = seg.vibrato_onset_s > 0.0 ? std::min(1.0, tau / seg.vibrato_onset_s) : 1.0;
      log_f += depth * seg.vibrato_cents / 1200.0 * std::sin(2.0 * kPi * seg.vibrato_rate_hz * tau);
    }
    if (s.phone->cls == Cls::voiced_fric) log_f -= kObstruentDipSt / 12.0 * std::sin(kPi * u);
    return std::exp2(log_f);
  }

 private:
  [[nodiscard]] double contour_log2(double t) const {
    if (times_.empty()) return 0.0;  // checked when compiling
    if (t <= times_.front()) return logs_.front();
    if (t >= times_.back()) return logs_.back();
    const auto it = std::upper_bound(times_.begin(), times_.end(), t);
    const auto j = static_cast<std::size_t>(it - times_.begin());
    const double t0 = times_[j - 1], t1 = times_[j];
    const double w = t1 > t0 ? (t - t0) / (t1 - t0) : 1.0;
    return logs_[j - 1] + (logs_[j] - logs_[j - 1]) * w;
  }

  const std::vector<SegInfo>& segs_;
  std::vector<double> times_;
  std::vector<double> logs_;
};

double voice_formant_scale(const VoiceSpec& v) {
  return v.formant_scale > 0.0 ? v.formant_scale : default_voice(v.type).formant_scale;
}

std::vector<SegInfo> compile_segments(const Script& script) {
  std::vector<SegInfo> segs;
  const double scale = voice_formant_scale(script.voice);
  double t = 0.0;
  for (const auto& seg : script.segments) {
    if (!(seg.duration_s >= 0.0)) throw std::invalid_argument("voice_synth: negative segment duration");
    SegInfo s;
    s.seg = &seg;
    s.phone = &info(seg.phone);
    s.t0 = t;
    t += seg.duration_s;
    s.t1 = t;
    s.voiced = is_voiced(seg.phone);
    s.formants = phone_formants(seg.phone, scale);
    s.voice_gain = db_to_lin(s.phone->voice_db + seg.gain_db);
    if (s.voiced && !(seg.f0_start_hz > 0.0) && script.f0_contour.empty()) {
      throw std::invalid_argument("voice_synth: voiced segment without F0 and no f0_contour");
    }
    segs.push_back(s);
  }
  // Unvoiced segments take the vocal tract (for /h/ and stop aspiration) and the voicing gain of the
  // next voiced segment, else of the previous one.
  for (std::size_t i = 0; i < segs.size(); ++i) {
    if (segs[i].voiced) continue;
    std::optional<std::size_t> from;
    for (std::size_t j = i + 1; j < segs.size() && !from; ++j) {
      if (segs[j].voiced) from = j;
    }
    for (std::size_t j = i; j-- > 0 && !from;) {
      if (segs[j].voiced) from = j;
    }
    if (from) {
      segs[i].formants = segs[*from].formants;
      segs[i].voice_gain = segs[*from].voice_gain;
    }
  }
  return segs;
}

// Pass 1: glottal cycles by phase accumulation over the F0 contour, with jitter and shimmer per cycle.
void place_pulses(const std::vector<SegInfo>& segs, const F0Eval& f0, const PulseParams& pp, double fs_int,
                  Rng& rng, std::vector<Run>& runs, std::vector<Pulse>& pulses) {
  const double jitter_sigma = pp.jitter_pct / 100.0 / kMeanAbsDiffPerSigma;
  const double shimmer_sigma = pp.shimmer_pct / 100.0 / kMeanAbsDiffPerSigma;
  std::size_t cycle = 0;
  auto draw = [&](double& r, double& amp) {
    const double alt = (cycle % 2 == 0) ? 1.0 : -1.0;
    r = (1.0 + jitter_sigma * std::clamp(rng.normal(), -3.0, 3.0)) * (1.0 + pp.alternation * alt);
    amp = std::max(0.05, 1.0 + shimmer_sigma * std::clamp(rng.normal(), -3.0, 3.0));
    if (pp.alternation > 0.0 && alt < 0.0) amp *= 0.75;
    ++cycle;
  };
  const double dt = 1.0 / fs_int;
  std::size_t i = 0;
  while (i < segs.size()) {
    if (!segs[i].voiced || segs[i].t1 <= segs[i].t0) {
      ++i;
      continue;
    }
    Run run;
    run.first = i;
    while (i + 1 < segs.size() && segs[i + 1].voiced) ++i;
    run.last = i;
    ++i;
    run.start = segs[run.first].t0;
    run.nominal_end = segs[run.last].t1;
    run.stop = run.start;

    std::size_t si = run.first;
    double phase = 0.0, r = 1.0, amp = 1.0;
    draw(r, amp);
    double cycle_start = run.start;
    double cycle_f0 = f0.at(si, run.start);
    for (std::int64_t k = 0;; ++k) {
      const double t = run.start + static_cast<double>(k) * dt;
      if (t >= run.nominal_end) break;
      const double tm = t + 0.5 * dt;  // midpoint rule
      while (si < run.last && tm >= segs[si].t1) ++si;
      const double inc = f0.at(si, tm) * dt / r;
      if (phase + inc < 1.0) {
        phase += inc;
        continue;
      }
      const double t_wrap = t + dt * (1.0 - phase) / inc;
      if (t_wrap > run.nominal_end) break;
      pulses.push_back({cycle_start, t_wrap, amp * std::min(4.0, kRefF0 / cycle_f0)});
      run.stop = t_wrap;
      const double r_old = r;
      draw(r, amp);
      phase = (phase + inc - 1.0) * r_old / r;  // rest of this step at the new cycle's rate
      cycle_start = t_wrap;
      cycle_f0 = f0.at(si, t_wrap);
    }
    if (run.stop > run.start) runs.push_back(run);
  }
}

}  // namespace

// ---------------------------------------------------------------------------------------------------
// Rng

double Rng::uniform() { return static_cast<double>(engine_() >> 11) * 0x1.0p-53; }
double Rng::uniform(double lo, double hi) { return lo + (hi - lo) * uniform(); }
int Rng::integer(int lo, int hi) {
  if (hi <= lo) return lo;
  const double span = static_cast<double>(hi) - static_cast<double>(lo) + 1.0;
  return std::min(hi, lo + static_cast<int>(std::floor(uniform() * span)));
}
double Rng::normal() {
  if (has_spare_) {
    has_spare_ = false;
    return spare_;
  }
  // Box & Muller (1958): two uniforms give two independent standard normals.
  const double u1 = 1.0 - uniform();  // (0, 1]
  const double u2 = uniform();
  const double rad = std::sqrt(-2.0 * std::log(u1));
  spare_ = rad * std::sin(2.0 * kPi * u2);
  has_spare_ = true;
  return rad * std::cos(2.0 * kPi * u2);
}
double Rng::fast_normal() {
  // Irwin–Hall: the sum of four uniforms on [0, 65535] has variance 4 * 65536^2 / 12 (near enough).
  const std::uint64_t u = engine_();
  const double sum = static_cast<double>(u & 0xFFFFu) + static_cast<double>((u >> 16) & 0xFFFFu) +
                     static_cast<double>((u >> 32) & 0xFFFFu) + static_cast<double>(u >> 48);
  return (sum - 2.0 * 65535.0) / (65536.0 * 0.5773502691896258);  // sqrt(1/3)
}

std::uint64_t mix_seed(std::uint64_t seed, std::uint64_t stream) {
  // splitmix64 increment and finaliser constants (memory).
  std::uint64_t z = seed + 0x9E3779B97F4A7C15ull * (stream + 1);
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
  return z ^ (z >> 31);
}

// ---------------------------------------------------------------------------------------------------
// Klatt resonator and glottal pulses

void KlattResonator::set(double freq_hz, double bandwidth_hz, double sample_rate_hz) {
  // Klatt (1980): C = -exp(-2 pi BW T), B = 2 exp(-pi BW T) cos(2 pi F T), A = 1 - B - C.
  const double t = 1.0 / sample_rate_hz;
  c_ = -std::exp(-2.0 * kPi * bandwidth_hz * t);
  b_ = 2.0 * std::exp(-kPi * bandwidth_hz * t) * std::cos(2.0 * kPi * freq_hz * t);
  a_ = 1.0 - b_ - c_;
}

double KlattResonator::gain_at(double f_hz, double sample_rate_hz) const {
  // H(z) = A / (1 - B z^-1 - C z^-2) at z = exp(j w).
  const double w = 2.0 * kPi * f_hz / sample_rate_hz;
  const double re = 1.0 - b_ * std::cos(w) - c_ * std::cos(2.0 * w);
  const double im = b_ * std::sin(w) + c_ * std::sin(2.0 * w);
  return std::abs(a_) / std::sqrt(re * re + im * im);
}

namespace {
constexpr std::size_t kPulseTable = 4096;
}

GlottalPulse GlottalPulse::rosenberg(double open_fraction, double close_fraction) {
  const double tp = open_fraction, tn = close_fraction;
  if (!(tp > 0.0 && tn > 0.0 && tp + tn <= 1.0)) throw std::invalid_argument("Rosenberg pulse: need Tp, Tn > 0, Tp + Tn <= 1");
  GlottalPulse g;
  g.table_.resize(kPulseTable + 1);
  for (std::size_t i = 0; i <= kPulseTable; ++i) {
    const double t = static_cast<double>(i) / kPulseTable;
    double v = 0.0;
    // Rosenberg (1971), trigonometric pulse.
    if (t < tp) {
      v = 0.5 * (1.0 - std::cos(kPi * t / tp));
    } else if (t < tp + tn) {
      v = std::cos(kPi * (t - tp) / (2.0 * tn));
    }
    g.table_[i] = v;
  }
  return g;
}

GlottalPulse GlottalPulse::lf(double tp, double te, double ta) {
  if (!(tp > 0.0 && te > tp && te < 1.0 && ta > 0.0 && ta < 1.0 - te)) {
    throw std::invalid_argument("LF pulse: need 0 < tp < te < 1 and 0 < ta < 1 - te");
  }
  // Liljencrants & Fant (1985), period normalised to 1, tc = 1, E0 = 1:
  //   E(t) = e^(alpha t) sin(wg t), wg = pi / tp, for t <= te;
  //   E(t) = -(Ee / (eps ta)) (e^(-eps (t - te)) - e^(-eps (tc - te))) for te < t <= tc,
  // with eps ta = 1 - e^(-eps (tc - te)) and alpha such that the flow (integral of E) returns to 0.
  const double wg = kPi / tp;
  const double d = 1.0 - te;
  double eps = 1.0 / ta;
  for (int i = 0; i < 100; ++i) eps = (1.0 - std::exp(-eps * d)) / ta;
  auto open_flow = [&](double alpha, double t) {
    return (std::exp(alpha * t) * (alpha * std::sin(wg * t) - wg * std::cos(wg * t)) + wg) / (alpha * alpha + wg * wg);
  };
  auto ee = [&](double alpha) { return -std::exp(alpha * te) * std::sin(wg * te); };
  auto return_flow = [&](double alpha, double x) {  // integral of the return phase from te to te + x
    return -(ee(alpha) / (eps * ta)) * ((1.0 - std::exp(-eps * x)) / eps - x * std::exp(-eps * d));
  };
  auto net = [&](double alpha) { return open_flow(alpha, te) + return_flow(alpha, d); };
  // Bracket the root by scanning, then bisect.
  double lo = -20.0, hi = lo;
  bool found = false;
  for (double a = -20.0; a < 400.0; a += 0.25) {
    if ((net(a) > 0.0) != (net(a + 0.25) > 0.0)) {
      lo = a;
      hi = a + 0.25;
      found = true;
      break;
    }
  }
  if (!found) throw std::invalid_argument("LF pulse: no zero-net-flow solution for these parameters");
  const bool lo_positive = net(lo) > 0.0;
  for (int i = 0; i < 80; ++i) {
    const double mid = 0.5 * (lo + hi);
    if ((net(mid) > 0.0) == lo_positive) lo = mid; else hi = mid;
  }
  const double alpha = 0.5 * (lo + hi);
  const double flow_te = open_flow(alpha, te);
  GlottalPulse g;
  g.table_.resize(kPulseTable + 1);
  double peak = 0.0;
  for (std::size_t i = 0; i <= kPulseTable; ++i) {
    const double t = static_cast<double>(i) / kPulseTable;
    const double v = t <= te ? open_flow(alpha, t) : flow_te + return_flow(alpha, t - te);
    g.table_[i] = std::max(0.0, v);
    peak = std::max(peak, g.table_[i]);
  }
  for (auto& v : g.table_) v /= peak;
  g.table_.back() = 0.0;
  return g;
}

double GlottalPulse::flow(double phase) const {
  const double x = std::clamp(phase, 0.0, 1.0) * kPulseTable;
  const auto i = std::min(static_cast<std::size_t>(x), kPulseTable - 1);
  const double frac = x - static_cast<double>(i);
  return table_[i] + (table_[i + 1] - table_[i]) * frac;
}

// ---------------------------------------------------------------------------------------------------
// Phones and voices

bool is_voiced(Phone phone) {
  const Cls c = info(phone).cls;
  return c == Cls::vowel || c == Cls::sonorant || c == Cls::voiced_fric;
}

std::string_view phone_name(Phone phone) { return info(phone).name; }

std::optional<Phone> phone_from_name(std::string_view name) {
  for (const auto& p : kPhones) {
    if (p.name == name) return p.phone;
  }
  return std::nullopt;
}

std::string_view voice_type_name(VoiceType type) {
  switch (type) {
    case VoiceType::low_male: return "low_male";
    case VoiceType::male: return "male";
    case VoiceType::female: return "female";
    case VoiceType::child: return "child";
    case VoiceType::soprano: return "soprano";
  }
  return "male";
}

std::optional<VoiceType> voice_type_from_name(std::string_view name) {
  for (auto t : {VoiceType::low_male, VoiceType::male, VoiceType::female, VoiceType::child, VoiceType::soprano}) {
    if (voice_type_name(t) == name) return t;
  }
  return std::nullopt;
}

std::array<Formant, 5> phone_formants(Phone phone, double formant_scale) {
  const PhoneInfo& p = info(phone);
  const bool nasal = phone == Phone::m || phone == Phone::n || phone == Phone::ng;
  // F4, F5 and the bandwidths: Klatt (1980) default-like values (memory).
  return {{{p.f1 * formant_scale, nasal ? 120.0 : 80.0},
           {p.f2 * formant_scale, 90.0},
           {p.f3 * formant_scale, 150.0},
           {3300.0 * formant_scale, 250.0},
           {3750.0 * formant_scale, 200.0}}};
}

VoiceSpec default_voice(VoiceType type) {
  VoiceSpec v;
  v.type = type;
  // Formant scales for women and children relative to the male averages: about 1.17 and 1.35, from
  // the ratios of Peterson & Barney's (1952) group means (memory); a low male slightly below 1 (our
  // choice). Pulse shapes: Rosenberg's (1971) Tp ~ 40 %, Tn ~ 16 % of the period (memory), a wider
  // open phase for women and children (our choice).
  switch (type) {
    case VoiceType::low_male:
      v.formant_scale = 0.93; v.open_fraction = 0.42; v.close_fraction = 0.16;
      v.jitter_pct = 0.5; v.shimmer_pct = 3.0; v.aspiration = 0.04;
      break;
    case VoiceType::male:
      v.formant_scale = 1.0; v.open_fraction = 0.40; v.close_fraction = 0.16;
      v.jitter_pct = 0.4; v.shimmer_pct = 2.5; v.aspiration = 0.04;
      break;
    case VoiceType::female:
      v.formant_scale = 1.17; v.open_fraction = 0.45; v.close_fraction = 0.20;
      v.jitter_pct = 0.4; v.shimmer_pct = 2.5; v.aspiration = 0.08;
      break;
    case VoiceType::child:
      v.formant_scale = 1.35; v.open_fraction = 0.45; v.close_fraction = 0.20;
      v.jitter_pct = 0.5; v.shimmer_pct = 3.0; v.aspiration = 0.08;
      break;
    case VoiceType::soprano:
      v.formant_scale = 1.17; v.open_fraction = 0.45; v.close_fraction = 0.18;
      v.jitter_pct = 0.3; v.shimmer_pct = 2.0; v.aspiration = 0.05;
      break;
  }
  return v;
}

double typical_f0_hz(VoiceType type) {
  switch (type) {
    case VoiceType::low_male: return 85.0;   // our choice: a low bass speaking voice
    case VoiceType::male: return 130.0;      // Peterson & Barney (1952), men
    case VoiceType::female: return 220.0;    // Peterson & Barney (1952), women
    case VoiceType::child: return 260.0;     // Peterson & Barney (1952), children
    case VoiceType::soprano: return 660.0;   // our choice: middle of a soprano's sung range (E5)
  }
  return 130.0;
}

double Script::duration_s() const {
  double d = 0.0;
  for (const auto& s : segments) d += s.duration_s;
  return d;
}

double Rendered::duration_s() const {
  return sample_rate_hz > 0.0 ? static_cast<double>(samples.size()) / sample_rate_hz : 0.0;
}

float Rendered::truth_at(double time_s) const {
  if (truth.empty() || time_s < 0.0) return 0.0f;
  const auto k = static_cast<std::size_t>(std::llround(time_s * 1000.0));
  return k < truth.size() ? truth[k].f0_hz : 0.0f;
}

// ---------------------------------------------------------------------------------------------------
// Rendering

Rendered render(const Script& script, double sample_rate_hz, const RenderOptions& options) {
  if (!(sample_rate_hz >= 8000.0 && sample_rate_hz <= 192000.0)) {
    throw std::invalid_argument("voice_synth: sample rate must be 8000..192000 Hz, got " + std::to_string(sample_rate_hz));
  }
  const int factor = std::max(1, static_cast<int>(std::ceil(kMinInternalRate / sample_rate_hz - 1e-9)));
  const double fs_int = sample_rate_hz * factor;
  const std::vector<SegInfo> segs = compile_segments(script);
  const F0Eval f0(script, segs);
  const PulseParams pp = pulse_params(script.voice);
  const GlottalPulse pulse = make_pulse(script.voice, pp);

  // Independent random streams, so that changing one part of the model leaves the others' draws alone.
  Rng cycle_rng(mix_seed(options.seed, 1));
  Rng aspiration_rng(mix_seed(options.seed, 2));
  Rng frication_rng(mix_seed(options.seed, 3));

  std::vector<Run> runs;
  std::vector<Pulse> pulses;
  place_pulses(segs, f0, pp, fs_int, cycle_rng, runs, pulses);

  const auto n_out = static_cast<std::size_t>(std::llround(script.duration_s() * sample_rate_hz));
  const std::size_t n_int = n_out * static_cast<std::size_t>(factor);
  std::vector<float> x(n_int, 0.0f);

  const double noise_sigma = std::sqrt(fs_int / kRefRate);  // white noise with the reference density
  const double rad_gain = fs_int / kRefRate;                // radiation: first difference, rate-independent
  std::array<NoiseChain, kNoiseChannels> chains;
  chains[static_cast<std::size_t>(Noise::s)] = NoiseChain(3500.0, 2, 5500.0, 2500.0, fs_int);
  chains[static_cast<std::size_t>(Noise::sh)] = NoiseChain(1600.0, 2, 2700.0, 1200.0, fs_int);
  chains[static_cast<std::size_t>(Noise::f)] = NoiseChain(800.0, 1, 6000.0, 6000.0, fs_int);
  chains[static_cast<std::size_t>(Noise::burst_p)] = NoiseChain(300.0, 1, 1000.0, 1500.0, fs_int);
  chains[static_cast<std::size_t>(Noise::burst_t)] = NoiseChain(2500.0, 1, 4500.0, 2500.0, fs_int);
  chains[static_cast<std::size_t>(Noise::burst_k)] = NoiseChain(1000.0, 1, 2000.0, 800.0, fs_int);
  OnePole aspiration_lp;  // pre-emphasis compensation: -6 dB/octave before the radiation's +6 dB/octave
  aspiration_lp.set(500.0, fs_int);

  std::array<KlattResonator, 5> tract;
  std::array<Formant, 5> formants = segs.empty() ? phone_formants(Phone::ah, 1.0) : segs.front().formants;
  constexpr std::size_t kCoefBlock = 16;
  const double form_k = 1.0 - std::exp(-static_cast<double>(kCoefBlock) / (0.010 * fs_int));  // 10 ms
  const double gain_k = 1.0 - std::exp(-1.0 / (0.006 * fs_int));                                // 6 ms
  double voice_gain = segs.empty() ? 1.0 : segs.front().voice_gain;
  const double breath = std::max(0.0, script.voice.aspiration) * kAspirationGain;
  double tract_prev = 0.0, source_prev = 0.0;

  std::size_t si = 0, pi = 0, ri = 0;
  for (std::size_t n = 0; n < n_int; ++n) {
    const double t = static_cast<double>(n) / fs_int;
    while (si + 1 < segs.size() && t >= segs[si].t1) ++si;
    const SegInfo& s = segs[si];

    // Glottal source.
    double shape = 0.0, source = 0.0, env = 0.0;
    while (pi < pulses.size() && t >= pulses[pi].t1) ++pi;
    const bool in_cycle = pi < pulses.size() && t >= pulses[pi].t0;
    if (in_cycle) {
      const Pulse& p = pulses[pi];
      shape = pulse.flow((t - p.t0) / (p.t1 - p.t0));
      while (ri < runs.size() && t >= runs[ri].stop) ++ri;
      if (ri < runs.size()) {
        const Run& r = runs[ri];
        const double len = std::min(kVoiceRampS, (r.stop - r.start) / 3.0);
        env = ramp(t - r.start, len) * ramp(r.stop - t, len);
      }
      source = shape * p.amp * env;
    }
    voice_gain += (s.voice_gain - voice_gain) * gain_k;
    source *= voice_gain;

    if (options.source_only) {
      x[n] = static_cast<float>((source - source_prev) * rad_gain);
      source_prev = source;
      continue;
    }

    // Aspiration: breathiness while voicing (half strength in the closed phase, as Klatt 1980 does
    // (memory)), /h/ and the aspiration after voiceless stops.
    double aspiration = 0.0;
    if (in_cycle && breath > 0.0) aspiration += breath * env * voice_gain * (0.5 + 0.5 * shape);
    const Cls cls = s.phone->cls;
    const double dur = s.t1 - s.t0;
    const double gain_seg = db_to_lin(s.seg->gain_db);
    if (cls == Cls::aspirate) {
      const double len = std::min(kFricRampS, dur / 3.0);
      aspiration += kHGain * gain_seg * ramp(t - s.t0, len) * ramp(s.t1 - t, len);
    }
    const double asp_len = cls == Cls::voiceless_stop ? std::min(kStopAspirationS, 0.35 * dur) : 0.0;
    const double burst_at = s.t1 - asp_len - std::min(kBurstS, 0.3 * dur);
    if (cls == Cls::voiceless_stop && t >= s.t1 - asp_len) {
      aspiration += 0.8 * kHGain * gain_seg * ramp(t - (s.t1 - asp_len), 0.004) * ramp(s.t1 - t, 0.006);
    }
    double tract_in = source;
    if (aspiration > 0.0) {
      tract_in += aspiration * aspiration_lp.lowpass(noise_sigma * aspiration_rng.fast_normal());
    }

    // Vocal tract: cascade of five Klatt (1980) resonators; formants glide between segments.
    if (n % kCoefBlock == 0) {
      for (std::size_t j = 0; j < 5; ++j) {
        formants[j].freq_hz += (s.formants[j].freq_hz - formants[j].freq_hz) * form_k;
        formants[j].bandwidth_hz += (s.formants[j].bandwidth_hz - formants[j].bandwidth_hz) * form_k;
        tract[j].set(formants[j].freq_hz, formants[j].bandwidth_hz, fs_int);
      }
    }
    double y = tract_in;
    for (auto& res : tract) y = res.process(y);
    // Radiation at the lips: first difference (Klatt 1980).
    double out = (y - tract_prev) * rad_gain;
    tract_prev = y;

    // Frication.
    if (s.phone->noise != Noise::none) {
      double level = 0.0;
      if (cls == Cls::voiceless_fric || cls == Cls::voiced_fric) {
        const double len = std::min(kFricRampS, dur / 3.0);
        level = ramp(t - s.t0, len) * ramp(s.t1 - t, len);
        if (cls == Cls::voiced_fric) level *= 0.35 * (0.3 + 0.7 * shape);  // noise pulsed by the glottis
      } else if ((cls == Cls::voiceless_stop || cls == Cls::voiced_stop) && t >= burst_at) {
        const double since = t - burst_at;
        const double len = std::min(kBurstS, 0.3 * dur);
        if (since < len) level = ramp(since, 0.0005) * std::exp(-since / kBurstDecayS);
        if (cls == Cls::voiced_stop) level *= 0.5;
      }
      if (level > 0.0) {
        const auto ch = static_cast<std::size_t>(s.phone->noise);
        out += level * gain_seg * noise_level(s.phone->noise) *
               chains[ch].process(noise_sigma * frication_rng.fast_normal());
      }
    }
    x[n] = static_cast<float>(out);
  }

  Rendered r;
  r.sample_rate_hz = sample_rate_hz;
  r.samples = factor > 1 ? decimate(x, factor, n_out) : std::move(x);
  if (options.peak_dbfs) normalize_peak(r.samples, *options.peak_dbfs);

  r.pulse_times_s.reserve(pulses.size());
  for (const auto& p : pulses) r.pulse_times_s.push_back(p.t0);

  // Truth every 1 ms: the contour inside runs [first cycle start, last cycle end), else 0.
  const double duration = r.duration_s();
  const auto n_truth = static_cast<std::size_t>(std::ceil(duration * 1000.0 - 1e-9));
  r.truth.reserve(n_truth);
  std::size_t run_i = 0, seg_i = 0;
  for (std::size_t k = 0; k < n_truth; ++k) {
    const double t = static_cast<double>(k) / 1000.0;
    while (run_i < runs.size() && t >= runs[run_i].stop) ++run_i;
    float value = 0.0f;
    if (run_i < runs.size() && t >= runs[run_i].start) {
      const Run& run = runs[run_i];
      seg_i = std::max(seg_i, run.first);
      while (seg_i < run.last && t >= segs[seg_i].t1) ++seg_i;
      value = static_cast<float>(f0.at(seg_i, t));
    }
    r.truth.push_back({t, value});
  }
  return r;
}

// ---------------------------------------------------------------------------------------------------
// Phrases

void append_pause(Script& script, double seconds) {
  if (seconds <= 0.0) return;
  Segment s;
  s.phone = Phone::pause;
  s.duration_s = seconds;
  script.segments.push_back(s);
}

void append_phrase(Script& script, std::string_view text, const Prosody& prosody, Rng& rng) {
  struct Item {
    Phone phone;
    bool accent;
    double dur;
  };
  std::vector<Item> items;
  std::size_t pos = 0;
  while (pos < text.size()) {
    const char c = text[pos];
    if (c == ' ' || c == '\t' || c == '\n' || c == '|') {
      ++pos;
      continue;
    }
    if (c == ',') {
      items.push_back({Phone::pause, false, 0.15});
      ++pos;
      continue;
    }
    bool accent = false;
    if (c == '*') {
      accent = true;
      ++pos;
    }
    std::size_t end = pos;
    while (end < text.size() && text[end] != ' ' && text[end] != '|' && text[end] != ',' && text[end] != '\t' &&
           text[end] != '\n') {
      ++end;
    }
    const std::string_view name = text.substr(pos, end - pos);
    const auto phone = phone_from_name(name);
    if (!phone || *phone == Phone::pause) {
      throw std::invalid_argument("append_phrase: unknown phone '" + std::string(name) + "'");
    }
    items.push_back({*phone, accent && info(*phone).cls == Cls::vowel, 0.0});
    pos = end;
  }
  if (items.empty()) return;

  // Durations: typical phone durations, longer when accented and at the phrase end (common practice;
  // factors our choice), spread +-12 %.
  const double tempo = prosody.tempo > 0.0 ? prosody.tempo : 1.0;
  std::optional<std::size_t> last_vowel;
  for (std::size_t i = 0; i < items.size(); ++i) {
    if (info(items[i].phone).cls == Cls::vowel) last_vowel = i;
  }
  for (std::size_t i = 0; i < items.size(); ++i) {
    Item& it = items[i];
    if (it.phone == Phone::pause) continue;
    double d = info(it.phone).dur_s * rng.uniform(0.88, 1.12);
    if (it.accent) d *= 1.35;
    if (last_vowel && i >= *last_vowel) d *= 1.3;
    it.dur = d / tempo;
  }

  const double t0 = script.duration_s();
  double t = 0.0;
  std::vector<std::pair<double, double>> accents;  // centre, half width
  double last_voiced_end = 0.0;
  for (const Item& it : items) {
    Segment s;
    s.phone = it.phone;
    s.duration_s = it.dur;
    script.segments.push_back(s);
    if (it.accent) accents.emplace_back(t + 0.5 * it.dur, std::max(0.5 * it.dur + 0.08, 0.12));
    t += it.dur;
    if (is_voiced(it.phone)) last_voiced_end = t;
  }
  const double total = t;
  const double final_end = last_voiced_end > 0.0 ? last_voiced_end : total;
  const double final_len = std::min(0.25, final_end);

  // Intonation (our model): a declining line in semitones, raised-cosine accents, a final fall or rise.
  auto st_at = [&](double u) {
    double st = prosody.start_st - prosody.declination_st * (total > 0.0 ? u / total : 0.0);
    for (const auto& [c, w] : accents) {
      if (std::abs(u - c) < w) st += prosody.accent_st * 0.5 * (1.0 + std::cos(kPi * (u - c) / w));
    }
    if (u > final_end - final_len) {
      const double x = std::clamp((u - (final_end - final_len)) / final_len, 0.0, 1.0);
      st += prosody.final_st * x * x * (3.0 - 2.0 * x);
    }
    double hz = prosody.base_hz * std::exp2(st / 12.0);
    if (prosody.min_hz > 0.0) hz = std::max(hz, prosody.min_hz);
    if (prosody.max_hz > 0.0) hz = std::min(hz, prosody.max_hz);
    return hz;
  };
  for (double u = 0.0;; u += 0.01) {
    const double uu = std::min(u, total);
    const double abs_t = t0 + uu;
    if (script.f0_contour.empty() || abs_t > script.f0_contour.back().time_s) {
      script.f0_contour.push_back({abs_t, st_at(uu)});
    }
    if (u >= total) break;
  }
}

std::string random_phrase_text(Rng& rng, int syllables) {
  static constexpr std::array<const char*, 20> kOnsets = {"s", "sh", "f", "h", "z", "v", "p", "t", "k", "b",
                                                          "d", "g", "m", "n", "l", "r", "w", "y", "s t", "p l"};
  static constexpr std::array<const char*, 10> kVowels = {"iy", "ih", "eh", "ae", "aa", "ao", "uh", "uw", "ah", "er"};
  static constexpr std::array<const char*, 10> kCodas = {"n", "m", "ng", "s", "t", "k", "z", "l", "r", "d"};
  syllables = std::max(1, syllables);
  std::vector<bool> accent(static_cast<std::size_t>(syllables), false);
  const int n_accents = std::min(syllables, 1 + (syllables > 4 ? 1 : 0) + (syllables > 7 ? 1 : 0));
  for (int a = 0; a < n_accents; ++a) {
    for (int tries = 0; tries < 8; ++tries) {
      const auto i = static_cast<std::size_t>(rng.integer(0, syllables - 1));
      if (!accent[i]) {
        accent[i] = true;
        break;
      }
    }
  }
  std::string out;
  int left_in_word = rng.integer(1, 3);
  for (int i = 0; i < syllables; ++i) {
    if (!out.empty()) out += left_in_word == 0 ? " | " : " ";
    if (left_in_word == 0) left_in_word = rng.integer(1, 3);
    if (rng.chance(0.75)) {
      out += kOnsets[static_cast<std::size_t>(rng.integer(0, static_cast<int>(kOnsets.size()) - 1))];
      out += ' ';
    }
    if (accent[static_cast<std::size_t>(i)]) out += '*';
    out += kVowels[static_cast<std::size_t>(rng.integer(0, static_cast<int>(kVowels.size()) - 1))];
    if (rng.chance(0.45)) {
      out += ' ';
      out += kCodas[static_cast<std::size_t>(rng.integer(0, static_cast<int>(kCodas.size()) - 1))];
    }
    --left_in_word;
  }
  return out;
}

// ---------------------------------------------------------------------------------------------------
// Corpus items

std::string_view item_kind_name(ItemKind kind) {
  switch (kind) {
    case ItemKind::speech: return "speech";
    case ItemKind::sustained: return "sustained";
    case ItemKind::glide: return "glide";
    case ItemKind::sung: return "sung";
    case ItemKind::fry: return "fry";
    case ItemKind::breathy: return "breathy";
  }
  return "speech";
}

namespace {

constexpr double kMaxItemS = 6.0;

struct SpeakingRange {
  double base_lo, base_hi, min_hz, max_hz;
};

// Phrase floors and limits per voice (our choice around Peterson & Barney's averages; the low male
// stays within about 60–110 Hz).
SpeakingRange speaking_range(VoiceType v) {
  switch (v) {
    case VoiceType::low_male: return {62.0, 68.0, 60.0, 110.0};
    case VoiceType::male: return {95.0, 118.0, 75.0, 210.0};
    case VoiceType::female: return {165.0, 200.0, 140.0, 380.0};
    case VoiceType::child: return {220.0, 265.0, 190.0, 460.0};
    case VoiceType::soprano: return {190.0, 230.0, 160.0, 420.0};
  }
  return {95.0, 118.0, 75.0, 210.0};
}

Phone pick(Rng& rng, std::initializer_list<Phone> phones) {
  const auto i = static_cast<std::size_t>(rng.integer(0, static_cast<int>(phones.size()) - 1));
  return *(phones.begin() + static_cast<std::ptrdiff_t>(i));
}

Segment voiced_seg(Phone p, double dur, double f_start, double f_end, GlideShape shape = GlideShape::linear) {
  Segment s;
  s.phone = p;
  s.duration_s = dur;
  s.f0_start_hz = f_start;
  s.f0_end_hz = f_end;
  s.glide = shape;
  return s;
}

void vary_voice(VoiceSpec& v, Rng& rng) {
  v.model = rng.chance(0.5) ? GlottalModel::lf : GlottalModel::rosenberg;
  v.jitter_pct = rng.uniform(0.2, 0.8);
  v.shimmer_pct = rng.uniform(1.5, 4.0);
  v.aspiration *= rng.uniform(0.7, 1.4);
}

void add_speech(Script& s, Rng& rng, VoiceType voice, double target_s, double max_s, const Prosody* base = nullptr) {
  const SpeakingRange range = speaking_range(voice);
  for (int attempt = 0; attempt < 16; ++attempt) {
    const int syllables = rng.integer(3, 9);
    Prosody p;
    if (base) {
      p = *base;
    } else {
      p.base_hz = rng.uniform(range.base_lo, range.base_hi);
      p.start_st = rng.uniform(2.0, 4.0);
      p.declination_st = rng.uniform(1.5, 3.5);
      p.accent_st = voice == VoiceType::low_male ? rng.uniform(2.0, 3.5) : rng.uniform(2.5, 5.0);
      p.final_st = rng.chance(0.25) ? rng.uniform(2.5, 5.0) : -rng.uniform(1.5, 3.5);
      p.tempo = rng.uniform(0.9, 1.15);
      p.min_hz = range.min_hz;
      p.max_hz = range.max_hz;
    }
    Script trial = s;
    append_phrase(trial, random_phrase_text(rng, syllables), p, rng);
    if (trial.duration_s() + 0.2 > max_s) continue;
    s = std::move(trial);
    if (s.duration_s() >= target_s) return;
    append_pause(s, rng.uniform(0.25, 0.5));
  }
}

}  // namespace

Script make_item_script(ItemKind kind, VoiceType voice, std::uint64_t seed) {
  Rng rng(seed);
  Script s;
  s.voice = default_voice(voice);
  vary_voice(s.voice, rng);
  append_pause(s, rng.uniform(0.5, 1.0));
  const double typical = voice == VoiceType::soprano ? 523.25 : typical_f0_hz(voice);

  switch (kind) {
    case ItemKind::speech: {
      add_speech(s, rng, voice, rng.uniform(3.6, 5.4), kMaxItemS - 0.3);
      break;
    }
    case ItemKind::sustained:
    case ItemKind::breathy: {
      s.voice.jitter_pct = rng.uniform(0.3, 1.5);
      s.voice.shimmer_pct = rng.uniform(2.0, 6.0);
      if (kind == ItemKind::breathy) {
        // Breathy phonation: a long open phase, a slow closure, strong aspiration (our choice of values).
        s.voice.aspiration = rng.uniform(0.35, 0.7);  // harmonics-to-noise about 9 down to 3 dB
        s.voice.open_fraction = 0.50;
        s.voice.close_fraction = 0.30;
        s.voice.jitter_pct = rng.uniform(0.5, 1.5);
        s.voice.shimmer_pct = rng.uniform(3.0, 8.0);
      }
      const int count = rng.chance(0.5) ? 1 : 2;
      for (int i = 0; i < count; ++i) {
        const Phone v = pick(rng, {Phone::aa, Phone::iy, Phone::uw, Phone::eh, Phone::ah, Phone::ao, Phone::ae});
        const double f = typical * std::exp2(rng.uniform(-3.0, 3.0) / 12.0);
        const double dur = count == 1 ? rng.uniform(2.0, 3.4) : rng.uniform(1.2, 2.0);
        s.segments.push_back(voiced_seg(v, dur, f, f * std::exp2(rng.uniform(-0.3, 0.3) / 12.0)));
        if (i + 1 < count) append_pause(s, rng.uniform(0.3, 0.6));
      }
      break;
    }
    case ItemKind::glide: {
      const Phone v = pick(rng, {Phone::aa, Phone::uw, Phone::iy, Phone::ah, Phone::ao});
      auto pattern = [&](bool up_first) {
        const double lo = typical * std::exp2(rng.uniform(-4.0, -1.0) / 12.0);
        const double hi = lo * std::exp2(rng.uniform(5.0, 12.0) / 12.0);
        const double a = up_first ? lo : hi, b = up_first ? hi : lo;
        const double hold1 = rng.uniform(0.3, 0.5), glide1 = rng.uniform(0.15, 0.45);
        const double hold2 = rng.uniform(0.25, 0.4), glide2 = rng.uniform(0.15, 0.45);
        const double hold3 = rng.uniform(0.25, 0.4);
        std::vector<Segment> segs = {voiced_seg(v, hold1, a, a), voiced_seg(v, glide1, a, b, GlideShape::smooth),
                                     voiced_seg(v, hold2, b, b), voiced_seg(v, glide2, b, a, GlideShape::smooth),
                                     voiced_seg(v, hold3, a, a)};
        return segs;
      };
      for (const auto& seg : pattern(true)) s.segments.push_back(seg);
      const double gap = rng.uniform(0.25, 0.45);
      auto second = pattern(false);
      double second_len = gap;
      for (const auto& seg : second) second_len += seg.duration_s;
      if (s.duration_s() + second_len + 0.3 <= kMaxItemS) {
        append_pause(s, gap);
        for (const auto& seg : second) s.segments.push_back(seg);
      }
      break;
    }
    case ItemKind::sung: {
      // Notes of a major scale (MIDI numbers, A4 = 69 = 440 Hz), legato, with vibrato 5–6.5 Hz,
      // +-50–100 cents (common practice for trained singers; values our choice within that).
      static constexpr std::array<int, 15> kMajor = {0, 2, 4, 5, 7, 9, 11, 12, 14, 16, 17, 19, 21, 23, 24};
      const bool high = voice == VoiceType::soprano;
      const int tonic = high ? rng.integer(67, 74) : static_cast<int>(std::lround(69.0 + 12.0 * std::log2(typical / 440.0))) + rng.integer(-2, 3);
      const int max_midi = high ? 85 : tonic + 14;  // soprano up to C#6 (about 1109 Hz)
      const double rate = rng.uniform(5.0, 6.5);
      const double depth = rng.uniform(50.0, 100.0);
      const double target = rng.uniform(4.2, 5.5);
      int degree = rng.integer(0, 4);
      double prev_hz = 0.0;
      while (s.duration_s() < target) {
        int midi = tonic + kMajor[static_cast<std::size_t>(degree)];
        if (midi > max_midi) {
          degree = std::max(0, degree - 3);
          midi = tonic + kMajor[static_cast<std::size_t>(degree)];
        }
        const double hz = 440.0 * std::exp2((midi - 69) / 12.0);
        const Phone vowel = pick(rng, {Phone::aa, Phone::uw, Phone::iy, Phone::eh, Phone::ao});
        const double cycles = std::round(rng.uniform(0.55, 1.0) * rate);
        const double note_s = std::max(2.0, cycles) / rate;  // whole vibrato cycles: ends on the note
        const bool breath = prev_hz > 0.0 && rng.chance(0.25);
        const double breath_s = breath ? rng.uniform(0.2, 0.35) : 0.0;
        const Phone onset = pick(rng, {Phone::l, Phone::m, Phone::n, Phone::pause});
        const double trans = rng.uniform(0.06, 0.1);
        // Room for this note and the final pause (at most 0.4 s).
        if (s.duration_s() + breath_s + trans + note_s + 0.4 > kMaxItemS) break;
        if (breath) {
          append_pause(s, breath_s);
          prev_hz = 0.0;
        }
        if (onset != Phone::pause) {
          const double from = prev_hz > 0.0 ? prev_hz : hz;
          s.segments.push_back(voiced_seg(onset, trans, from, hz, GlideShape::smooth));
        } else if (prev_hz > 0.0) {
          s.segments.push_back(voiced_seg(vowel, trans, prev_hz, hz, GlideShape::smooth));
        }
        Segment note = voiced_seg(vowel, note_s, hz, hz);
        note.vibrato_rate_hz = rate;
        note.vibrato_cents = depth;
        note.vibrato_onset_s = 0.25;
        s.segments.push_back(note);
        prev_hz = hz;
        degree = std::clamp(degree + rng.integer(-3, 3), 0, static_cast<int>(kMajor.size()) - 1);
      }
      break;
    }
    case ItemKind::fry: {
      s.voice.fry = true;
      const Phone v = pick(rng, {Phone::aa, Phone::ah, Phone::eh, Phone::ao});
      const double f = rng.uniform(52.0, 62.0);
      s.segments.push_back(voiced_seg(v, rng.uniform(1.2, 2.0), f, f * std::exp2(rng.uniform(-1.0, 1.0) / 12.0)));
      append_pause(s, rng.uniform(0.3, 0.5));
      Prosody p;
      p.base_hz = rng.uniform(52.0, 58.0);
      p.start_st = rng.uniform(1.0, 3.0);
      p.declination_st = rng.uniform(1.0, 2.0);
      p.accent_st = rng.uniform(1.0, 2.0);
      p.final_st = -rng.uniform(0.5, 1.5);
      p.min_hz = 50.0;
      p.max_hz = 75.0;
      add_speech(s, rng, voice, s.duration_s() + 0.6, kMaxItemS - 0.3, &p);
      break;
    }
  }
  append_pause(s, rng.uniform(0.2, 0.4));
  return s;
}

// ---------------------------------------------------------------------------------------------------
// Noises and mixing

namespace {
std::vector<float> to_unit_rms(const std::vector<double>& y) {
  double p = 0.0;
  for (double v : y) p += v * v;
  const double g = !y.empty() && p > 0.0 ? 1.0 / std::sqrt(p / static_cast<double>(y.size())) : 1.0;
  std::vector<float> out(y.size());
  for (std::size_t i = 0; i < y.size(); ++i) out[i] = static_cast<float>(y[i] * g);
  return out;
}
}  // namespace

std::vector<float> white_noise(std::size_t n, std::uint64_t seed) {
  Rng rng(seed);
  std::vector<double> y(n);
  for (auto& v : y) v = rng.normal();
  return to_unit_rms(y);
}

std::vector<float> pink_noise(std::size_t n, std::uint64_t seed) {
  Rng rng(seed);
  // Paul Kellet's "refined" pink filter (coefficients (memory)): a sum of first-order low-passes
  // approximating -3 dB/octave within about 0.05 dB above 9 Hz at 44.1 kHz.
  double b0 = 0, b1 = 0, b2 = 0, b3 = 0, b4 = 0, b5 = 0, b6 = 0;
  std::vector<double> y(n);
  const std::size_t warmup = 8192;  // the slowest pole (0.99886) settles in a few thousand samples
  for (std::size_t i = 0; i < n + warmup; ++i) {
    const double white = rng.normal();
    b0 = 0.99886 * b0 + white * 0.0555179;
    b1 = 0.99332 * b1 + white * 0.0750759;
    b2 = 0.96900 * b2 + white * 0.1538520;
    b3 = 0.86650 * b3 + white * 0.3104856;
    b4 = 0.55000 * b4 + white * 0.5329522;
    b5 = -0.7616 * b5 - white * 0.0168980;
    const double pink = b0 + b1 + b2 + b3 + b4 + b5 + b6 + white * 0.5362;
    b6 = white * 0.115926;
    if (i >= warmup) y[i - warmup] = pink;
  }
  return to_unit_rms(y);
}

std::vector<float> mains_hum(std::size_t n, double sample_rate_hz, double mains_hz, std::uint64_t seed) {
  Rng rng(seed);
  // The supply frequency wanders by a few hundredths of a hertz (our choice of offset).
  const double f = mains_hz + rng.uniform(-0.05, 0.05);
  std::vector<double> y(n, 0.0);
  for (int k = 1; k * f <= 1000.0 && k * f < 0.5 * sample_rate_hz; ++k) {
    // Odd harmonics stronger than even ones (our choice of amplitudes).
    const double amp = k == 1 ? 1.0 : (k % 2 == 1 ? 0.6 : 0.25) / std::sqrt(static_cast<double>(k));
    const double phase = rng.uniform(0.0, 2.0 * kPi);
    const double w = 2.0 * kPi * k * f / sample_rate_hz;
    for (std::size_t i = 0; i < n; ++i) y[i] += amp * std::sin(w * static_cast<double>(i) + phase);
  }
  return to_unit_rms(y);
}

double mean_power(std::span<const float> x) {
  if (x.empty()) return 0.0;
  double p = 0.0;
  for (float v : x) p += static_cast<double>(v) * static_cast<double>(v);
  return p / static_cast<double>(x.size());
}

double mix_at_snr(std::vector<float>& target, std::span<const float> interferer, double snr_db) {
  if (target.empty() || interferer.empty()) throw std::invalid_argument("mix_at_snr: empty signal");
  const double pt = mean_power(target);
  double pi = 0.0;
  for (std::size_t i = 0; i < target.size(); ++i) {
    const double v = interferer[i % interferer.size()];
    pi += v * v;
  }
  pi /= static_cast<double>(target.size());
  if (!(pt > 0.0) || !(pi > 0.0)) throw std::invalid_argument("mix_at_snr: signal with zero power");
  // SNR = 10 log10(Pt / (g^2 Pi))  =>  g = sqrt(Pt / (Pi 10^(SNR/10))).
  const double g = std::sqrt(pt / (pi * std::pow(10.0, snr_db / 10.0)));
  for (std::size_t i = 0; i < target.size(); ++i) {
    target[i] = static_cast<float>(target[i] + g * interferer[i % interferer.size()]);
  }
  return g;
}

double normalize_peak(std::vector<float>& x, double peak_dbfs) {
  float peak = 0.0f;
  for (float v : x) peak = std::max(peak, std::abs(v));
  if (!(peak > 0.0f)) return 1.0;
  const double g = db_to_lin(peak_dbfs) / peak;
  for (auto& v : x) v = static_cast<float>(v * g);
  return g;
}

// ---------------------------------------------------------------------------------------------------
// The demo session

Rendered render_demo_session(double sample_rate_hz) {
  // A voice coach warms up a fictional choir, the Harbour Street Singers, before their Thursday
  // rehearsal. Phrases are written in append_phrase's phone notation; the English they stand for is
  // beside each one.
  Script s;
  s.voice = default_voice(VoiceType::female);
  s.voice.model = GlottalModel::lf;
  s.voice.jitter_pct = 0.4;
  s.voice.shimmer_pct = 2.5;
  Rng rng(0x5eed'c0ac'4001ull);
  Prosody say;
  say.base_hz = 180.0;
  say.start_st = 3.0;
  say.declination_st = 3.0;
  say.accent_st = 4.0;
  say.final_st = -3.0;
  say.min_hz = 150.0;
  say.max_hz = 330.0;
  Prosody ask = say;
  ask.final_st = 4.5;

  append_pause(s, 0.8);
  // "Good evening, singers!"
  append_phrase(s, "g uh d | *iy v n ih ng , s *ih ng er z", say, rng);
  append_pause(s, 0.45);
  // "Let's warm up our voices for tonight's rehearsal."
  append_phrase(s, "l eh t s | w *ao r m | ah p | aa r | v ao ih s ih z | f er | t ah n *aa ih t s | r ih h *er s ah l", say, rng);
  append_pause(s, 0.5);
  // "Ready? First, a long, easy ah."
  append_phrase(s, "r *eh d iy", ask, rng);
  append_pause(s, 0.35);
  append_phrase(s, "f *er s t , ah | l ao ng | *iy z iy | aa", say, rng);
  append_pause(s, 0.6);
  // Sustained [a] at A3 (220 Hz), 3 s.
  s.segments.push_back(voiced_seg(Phone::aa, 3.0, 220.0, 218.0));
  append_pause(s, 0.7);
  // "Lovely. Now a slow glide on oo, up and down."
  append_phrase(s, "l *ah v l iy , n aa uw | ah | s l ao uw | g l *aa ih d | aa n | uw , *ah p | ae n d | d aa uw n", say, rng);
  append_pause(s, 0.6);
  // Glide on [u]: G3 (196 Hz) up to G4 (392 Hz) and back, 2.5 s each way.
  s.segments.push_back(voiced_seg(Phone::uw, 0.4, 196.0, 196.0));
  s.segments.push_back(voiced_seg(Phone::uw, 2.5, 196.0, 392.0, GlideShape::smooth));
  s.segments.push_back(voiced_seg(Phone::uw, 0.3, 392.0, 392.0));
  s.segments.push_back(voiced_seg(Phone::uw, 2.5, 392.0, 196.0, GlideShape::smooth));
  append_pause(s, 0.7);
  // "Good. Now sing these notes with me."
  append_phrase(s, "g *uh d , n aa uw | s *ih ng | d iy z | n ao uw t s | w ih | m *iy", say, rng);
  append_pause(s, 0.6);
  // Sung "la" on A4, C#5, E5, C#5, A4 with vibrato 5.5 Hz, +-60 cents; each note 5 vibrato cycles.
  const std::array<double, 5> notes = {440.0, 554.37, 659.26, 554.37, 440.0};
  double prev = 0.0;
  for (double hz : notes) {
    s.segments.push_back(voiced_seg(Phone::l, 0.08, prev > 0.0 ? prev : hz, hz, GlideShape::smooth));
    Segment note = voiced_seg(Phone::aa, 5.0 / 5.5, hz, hz);
    note.vibrato_rate_hz = 5.5;
    note.vibrato_cents = 60.0;
    note.vibrato_onset_s = 0.25;
    s.segments.push_back(note);
    prev = hz;
  }
  append_pause(s, 0.7);
  // "Beautiful. Take a breath, and then we start the first song."
  append_phrase(s, "b y *uw t ih f ah l , t eh ih k | ah | b r *eh f , ae n d | d eh n | w iy | s t *aa r t | d ah | f er s t | s *ao ng", say, rng);
  append_pause(s, 0.8);

  RenderOptions opt;
  opt.seed = 0x5eed'c0ac'4002ull;
  opt.peak_dbfs = -3.0;
  return render(s, sample_rate_hz, opt);
}

}  // namespace pitchwire::dsp
