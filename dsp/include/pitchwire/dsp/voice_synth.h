// voice_synth.h: a source–filter test voice whose F0 is known exactly, for tests, benchmarks, the
// synthetic corpus and the built-in demo input.
//
// Thread contract: pure functions and small value types. render() allocates and may take a second for a
// long script; call it before a stream starts, never from an audio callback. Nothing here keeps state
// between calls, so any thread may call anything.
//
// Model (sources named beside each formula in voice_synth.cpp):
//   glottal flow pulse per period (Rosenberg 1971 or Liljencrants–Fant 1985), periods placed by
//   integrating the instantaneous F0 contour (phase accumulation), per-period jitter and shimmer
//   (Baken & Orlikoff 2000 definitions), aspiration noise in the source
//   -> cascade of five Klatt (1980) resonators (vowel formants: Peterson & Barney 1952)
//   -> radiation as a first difference
//   -> + frication noise (s, sh, f, stop bursts), shaped per consonant.
// Everything is computed at an internal rate of at least 176.4 kHz and decimated with a Kaiser-windowed
// sinc low-pass, so pulses at 1 kHz F0 do not alias.
//
// Ground truth: at time t the truth is the F0 contour value (with vibrato and the small dips at voiced
// obstruents, without jitter), and exactly 0 where the glottal source is off. A stretch of voiced
// segments is voiced from its first glottal cycle's start (the segment start) to the end of its last
// complete glottal cycle (at most one period before the segment end). Jitter perturbs individual
// periods; the truth stays the contour.
//
// Determinism: every random draw comes from std::mt19937_64 through our own uniform/normal code
// (Rng below), so a seed gives the same samples with any standard library.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <optional>
#include <random>
#include <span>
#include <string>
#include <string_view>
#include <vector>

namespace pitchwire::dsp {

// ---------------------------------------------------------------------------------------------------
// Rendered audio with its truth.

struct TruthSample {
  double time_s;
  float f0_hz;  // f0_hz == 0 means unvoiced at that instant
};

struct Rendered {
  double sample_rate_hz = 0.0;
  std::vector<float> samples;
  std::vector<TruthSample> truth;     // every 1 ms from t = 0 while t < duration_s()
  std::vector<double> pulse_times_s;  // start (opening instant) of every glottal cycle, ascending

  [[nodiscard]] double duration_s() const;
  // Truth at any time (not only on the 1 ms grid): nearest grid sample, 0 outside the file.
  [[nodiscard]] float truth_at(double time_s) const;
};

// The built-in demo voice: a scripted warm-up given by a voice coach to a fictional choir before its
// rehearsal, about 35 s: spoken phrases with intonation, unvoiced consonants and pauses, a sustained
// vowel, a slow glide up and down, and sung notes with vibrato. Deterministic (fixed seed).
Rendered render_demo_session(double sample_rate_hz);

// ---------------------------------------------------------------------------------------------------
// Deterministic random numbers: std::mt19937_64 output turned into numbers by our own code.

class Rng {
 public:
  explicit Rng(std::uint64_t seed) : engine_(seed) {}
  std::uint64_t next() { return engine_(); }
  double uniform();                       // [0, 1), 53 random bits
  double uniform(double lo, double hi);   // [lo, hi)
  int integer(int lo, int hi);            // lo..hi inclusive
  bool chance(double p) { return uniform() < p; }
  double normal();                        // standard normal, Box–Muller (Box & Muller 1958)
  double fast_normal();                   // approximately normal: sum of four 16-bit uniforms (Irwin–Hall)

 private:
  std::mt19937_64 engine_;
  bool has_spare_ = false;
  double spare_ = 0.0;
};

// Derives an independent seed for a numbered stream from a seed (the splitmix64 finaliser, Steele,
// Lea & Flood 2014; constants (memory)).
[[nodiscard]] std::uint64_t mix_seed(std::uint64_t seed, std::uint64_t stream);

// ---------------------------------------------------------------------------------------------------
// Building blocks, public so tests can check them.

// Klatt (1980) digital resonator: y[n] = A x[n] + B y[n-1] + C y[n-2] with
// C = -exp(-2 pi BW T), B = 2 exp(-pi BW T) cos(2 pi F T), A = 1 - B - C (unity gain at DC).
class KlattResonator {
 public:
  void set(double freq_hz, double bandwidth_hz, double sample_rate_hz);
  double process(double x) {
    const double y = a_ * x + b_ * y1_ + c_ * y2_;
    y2_ = y1_;
    y1_ = y;
    return y;
  }
  void reset() { y1_ = y2_ = 0.0; }
  [[nodiscard]] double a() const { return a_; }
  [[nodiscard]] double b() const { return b_; }
  [[nodiscard]] double c() const { return c_; }
  // Magnitude of the frequency response at f_hz.
  [[nodiscard]] double gain_at(double f_hz, double sample_rate_hz) const;

 private:
  double a_ = 1.0, b_ = 0.0, c_ = 0.0;
  double y1_ = 0.0, y2_ = 0.0;
};

enum class GlottalModel { rosenberg, lf };

// One glottal flow pulse over a period normalised to 1, as a table (flow 0..1, peak 1, 0 at phase 0
// and after closure). Rosenberg (1971) trigonometric pulse: opening 0.5(1 - cos(pi t/Tp)) for t < Tp,
// closing cos(pi (t - Tp) / (2 Tn)) for Tp <= t < Tp + Tn. LF (Liljencrants & Fant 1985): flow
// derivative E0 e^(alpha t) sin(pi t/tp) up to te, then an exponential return phase with time constant
// ta, with alpha chosen so the flow returns to 0 at the period end; the table holds its integral.
class GlottalPulse {
 public:
  static GlottalPulse rosenberg(double open_fraction, double close_fraction);
  static GlottalPulse lf(double tp, double te, double ta);
  [[nodiscard]] double flow(double phase) const;  // phase in [0, 1)

 private:
  std::vector<double> table_;
};

// ---------------------------------------------------------------------------------------------------
// Scripting utterances.

enum class VoiceType { low_male, male, female, child, soprano };

// Phones: the ten vowels of Peterson & Barney (1952) (iy ih eh ae aa ao uh uw ah er), sonorants (m n ng
// l r w y), voiced fricatives (z v), voiceless fricatives (s sh f h), stops (p t k b d g) and a pause.
enum class Phone : std::uint8_t {
  pause,
  iy, ih, eh, ae, aa, ao, uh, uw, ah, er,
  m, n, ng, l, r, w, y,
  z, v,
  s, sh, f, h,
  p, t, k, b, d, g,
};

// True where the glottal source runs: vowels, sonorants, z and v.
[[nodiscard]] bool is_voiced(Phone phone);
[[nodiscard]] std::string_view phone_name(Phone phone);
[[nodiscard]] std::optional<Phone> phone_from_name(std::string_view name);
[[nodiscard]] std::string_view voice_type_name(VoiceType type);
[[nodiscard]] std::optional<VoiceType> voice_type_from_name(std::string_view name);

struct Formant {
  double freq_hz;
  double bandwidth_hz;
};
// F1..F5 of a phone for a formant scale (1 = adult male). Unvoiced consonants return the neutral vowel.
[[nodiscard]] std::array<Formant, 5> phone_formants(Phone phone, double formant_scale);

struct VoiceSpec {
  VoiceType type = VoiceType::male;
  GlottalModel model = GlottalModel::rosenberg;
  double jitter_pct = 0.4;     // local jitter (Baken & Orlikoff): mean |T_i - T_i+1| / mean T, percent
  double shimmer_pct = 2.5;    // local shimmer: the same on cycle amplitudes, percent
  double aspiration = 0.05;    // aspiration noise in the source; about 1 gives harmonics-to-noise near 0 dB
  double formant_scale = 0.0;  // 0: the voice type's (1 = adult male)
  double open_fraction = 0.0;  // 0: the voice type's (Rosenberg Tp, LF tp as a fraction of the period)
  double close_fraction = 0.0; // 0: the voice type's (Rosenberg Tn; LF uses te = tp + close_fraction)
  bool fry = false;            // vocal fry: short pulses, strong jitter and shimmer, alternating cycles
};
[[nodiscard]] VoiceSpec default_voice(VoiceType type);
// Typical speaking F0 (Peterson & Barney 1952 averages for men, women, children); low male and soprano
// are our own choices (a low bass voice, a soprano's sung mid range).
[[nodiscard]] double typical_f0_hz(VoiceType type);

enum class GlideShape {
  linear,  // linear in cents over the segment
  smooth,  // raised cosine in cents (slow at both ends)
};

struct Segment {
  Phone phone = Phone::pause;
  double duration_s = 0.1;
  // Voiced phones only. F0 at the start and end of the segment; 0 at the start means: take F0 from
  // Script::f0_contour. 0 at the end means: same as the start.
  double f0_start_hz = 0.0;
  double f0_end_hz = 0.0;
  GlideShape glide = GlideShape::linear;
  double vibrato_rate_hz = 0.0;
  double vibrato_cents = 0.0;    // peak deviation, +-
  double vibrato_onset_s = 0.0;  // vibrato depth grows linearly from 0 over this time
  double gain_db = 0.0;          // loudness of this segment relative to the voice's normal level
};

struct F0Point {
  double time_s;
  double f0_hz;
};

struct Script {
  VoiceSpec voice;
  std::vector<Segment> segments;
  // F0 for voiced segments without their own F0: piecewise linear in cents between points (absolute
  // times, ascending), held constant before the first and after the last point.
  std::vector<F0Point> f0_contour;

  [[nodiscard]] double duration_s() const;
};

struct RenderOptions {
  std::uint64_t seed = 1;
  std::optional<double> peak_dbfs = -3.0;  // peak normalisation (AES17 dBFS); empty: raw model level
  bool source_only = false;  // the radiated glottal source alone: no vocal tract, noise or frication
};

// Throws std::invalid_argument for a sample rate outside 8000..192000 Hz, a negative duration, or a
// voiced segment with no F0 (neither its own nor a contour).
Rendered render(const Script& script, double sample_rate_hz, const RenderOptions& options = {});

// ---------------------------------------------------------------------------------------------------
// Speech-like phrases.

struct Prosody {
  double base_hz = 120.0;        // floor of the phrase's F0
  double start_st = 3.0;         // F0 at the phrase start, semitones above base
  double declination_st = 2.5;   // linear fall over the phrase
  double accent_st = 3.5;        // height of a pitch accent (vowels marked with '*')
  double final_st = -2.5;        // movement over the last 250 ms: negative falls, positive rises (question)
  double tempo = 1.0;            // durations are divided by this
  double min_hz = 0.0;           // F0 is clamped into [min_hz, max_hz] when these are set (> 0)
  double max_hz = 0.0;
};

// Appends a phrase written as phone names separated by spaces, words separated by '|', a short pause
// at ',', and '*' right before an accented vowel: "g *uh d | iy v n ih ng". Durations get a +-12 %
// random spread from rng. Adds the phrase's F0 to script.f0_contour (a point every 10 ms).
// Throws std::invalid_argument on an unknown phone name.
void append_phrase(Script& script, std::string_view text, const Prosody& prosody, Rng& rng);
void append_pause(Script& script, double seconds);
// A random syllable string in append_phrase's notation, with one to three accents.
[[nodiscard]] std::string random_phrase_text(Rng& rng, int syllables);

// ---------------------------------------------------------------------------------------------------
// Corpus items: randomised scripts of a kind for a voice, 2–6 s each, starting with a pause of
// 0.4–1 s. Deterministic for the seed; other seeds give other texts, notes and contours.

enum class ItemKind { speech, sustained, glide, sung, fry, breathy };
[[nodiscard]] std::string_view item_kind_name(ItemKind kind);
// speech: phrases with declination, accents, unvoiced consonants and pauses.
// sustained: one or two steady vowels with jitter and shimmer. breathy: the same with strong aspiration.
// glide: fast glides up and down (up to an octave in 0.15–0.45 s). sung: notes with vibrato (5–6.5 Hz,
// +-50–100 cents). fry: vocal fry near 50–70 Hz, a sustained vowel and a short phrase.
[[nodiscard]] Script make_item_script(ItemKind kind, VoiceType voice, std::uint64_t seed);

// ---------------------------------------------------------------------------------------------------
// Noises and mixing for test conditions. All noises have unit RMS.

[[nodiscard]] std::vector<float> white_noise(std::size_t n, std::uint64_t seed);
// Pink noise with Paul Kellet's filter ("refined" version, designed for 44.1 kHz; at other rates the
// -3 dB/octave slope holds approximately over the audio band).
[[nodiscard]] std::vector<float> pink_noise(std::size_t n, std::uint64_t seed);
// Mains hum: mains_hz fundamental with harmonics up to 1 kHz, odd ones stronger (as from a saturated
// transformer), random phases from the seed.
[[nodiscard]] std::vector<float> mains_hum(std::size_t n, double sample_rate_hz, double mains_hz,
                                           std::uint64_t seed);

[[nodiscard]] double mean_power(std::span<const float> x);
// Adds interferer (repeated or cut to target's length) to target, scaled so that the mean power of the
// target over the whole buffer over the mean power of the scaled interferer is snr_db. Returns the
// gain applied to the interferer. Throws std::invalid_argument if either has zero power.
double mix_at_snr(std::vector<float>& target, std::span<const float> interferer, double snr_db);
// Scales x so its absolute peak is peak_dbfs (0 dBFS = 1.0). Returns the gain (1 for silence).
double normalize_peak(std::vector<float>& x, double peak_dbfs);

}  // namespace pitchwire::dsp
