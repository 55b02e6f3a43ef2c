// pitch_tracker.cpp: the incremental F0 estimator and tracker. See pitch_tracker.h for the contract and
// docs/estimator.md for the method with its sources.
//
// Thread contract: one thread at a time (the analysis thread). Everything is allocated in the constructor;
// process()/flush() do no allocation of their own (libsamplerate keeps its own buffers, made on creation).
#include "pitchwire/dsp/pitch_tracker.h"

#include <kiss_fftr.h>
#include <samplerate.h>

#include <algorithm>
#include <array>
#include <cmath>
#include <complex>
#include <limits>
#include <numeric>
#include <stdexcept>
#include <vector>

namespace pitchwire::dsp {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kAnalysisRateHz = 8000.0;   // inputs above this are resampled down to it
constexpr double kResamplerHoldBackS = 0.0024;  // libsamplerate's fastest sinc to 8 kHz: half its filter
constexpr double kBinCents = 25.0;           // HMM pitch bin width
constexpr double kMaxSlopeStPerS = 200.0;    // fastest F0 change the tracker follows (semitones per second)
constexpr double kVoicingSwitch = 0.01;      // per-frame probability of leaving the voiced / unvoiced state
constexpr double kLowpassHz = 1800.0;        // analysis band upper edge (YIN paper: low-passing helps)
constexpr double kHighpassHz = 40.0;         // DC and rumble
constexpr double kHumMaxHz = 1000.0;         // highest mains harmonic cancelled
constexpr std::size_t kMaxCandidates = 8;
constexpr std::size_t kThresholds = 100;     // resolution of the threshold prior's table
constexpr double kLevelGateBelowPeakDb = 22.0;   // periodic frames this far under the recent peak are background
constexpr double kPeakDecayDbPerS = 3.0;         // and how fast that peak forgets
constexpr double kSpeakerMemoryS = 30.0;         // speaker model: how long the voice's registers are remembered
constexpr double kSpeakerKnownShare = 0.1;      // a bin with this share of the fullest one is a known register
constexpr double kSpeakerMinWeight = 20.0;       // and how much must be heard (peak-level frames) first
constexpr double kFarCents = 1000.0;             // a candidate this far from every known register is "far"
constexpr double kFarBelowPeakDb = 6.0;          // and must be within this much of the recent peak level
constexpr int kSettleSmoothReach = 4;            // settled F0 averages neighbours up to 4 hops away
constexpr double kPriorA = 2.0, kPriorB = 18.0;  // threshold prior Beta(2, 18): mean 0.1 (YIN's threshold)
constexpr double kVoicedDip = 0.55;              // deepest dip value at which voicing evidence is 1/2
constexpr double kVoicedDipWidth = 0.05;         // and how fast the evidence changes around it
constexpr double kCentreBelowWindowDb = 10.0;    // a frame whose middle is this much quieter than its
                                                 // window sits in a pause next to a voiced stretch
constexpr double kEarlyMaxLagS = 0.008;          // early live value: lags up to 8 ms (F0 from 125 Hz) over a
                                                 // window of two such lags, complete 12 ms before the full one
constexpr float kEarlyUnknownObs = 0.5f;         // early observation of bins below the early range: no evidence
constexpr double kEarlyMaxDip = 0.08;            // an early value is published only from a dip this deep
constexpr std::size_t kEarlyLookahead = 2;       // or, unclear or unvoiced, when such a frame follows within 2 hops

// Second-order section, transposed direct form II (RBJ cookbook coefficients, common practice).
struct Biquad {
  double b0 = 1, b1 = 0, b2 = 0, a1 = 0, a2 = 0;
  double z1 = 0, z2 = 0;

  static Biquad lowpass(double fc, double fs, double q) { return make(fc, fs, q, false); }
  static Biquad highpass(double fc, double fs, double q) { return make(fc, fs, q, true); }

  double process(double x) {
    const double y = b0 * x + z1;
    z1 = b1 * x - a1 * y + z2;
    z2 = b2 * x - a2 * y;
    return y;
  }
  void reset() { z1 = z2 = 0; }

 private:
  static Biquad make(double fc, double fs, double q, bool high) {
    const double w0 = 2 * kPi * fc / fs;
    const double alpha = std::sin(w0) / (2 * q);
    const double c = std::cos(w0);
    const double a0 = 1 + alpha;
    Biquad s;
    if (high) {
      s.b0 = (1 + c) / 2 / a0;
      s.b1 = -(1 + c) / a0;
      s.b2 = (1 + c) / 2 / a0;
    } else {
      s.b0 = (1 - c) / 2 / a0;
      s.b1 = (1 - c) / a0;
      s.b2 = (1 - c) / 2 / a0;
    }
    s.a1 = -2 * c / a0;
    s.a2 = (1 - alpha) / a0;
    return s;
  }
};

// Cancels steady mains hum: for the 50 Hz and the 60 Hz series, one complex amplitude per harmonic is
// estimated by LMS against a reference oscillator (an adaptive notch bank). The step size starts as a
// running average and settles to a narrow bandwidth (~0.5 Hz), so only components that stay phase-locked
// to a mains harmonic for a good part of a second are removed.
// The two fundamentals (50 and 60 Hz themselves) are always estimated; a series is switched on, and its
// harmonics estimated and the whole series subtracted, only while its fundamental carries at least 20 %
// of the input power (off below 0.5 %). A voice whose harmonics happen to sit on multiples of 50 Hz (a
// steady 100 Hz vowel) has no energy at 50 Hz and is left alone, and without hum the cost is two
// oscillators per sample.
class HumCanceller {
 public:
  HumCanceller() = default;
  HumCanceller(double fs, double max_hz) {
    for (std::size_t m = 0; m < 2; ++m) {
      Series& s = series_[m];
      const double mains = m == 0 ? 50.0 : 60.0;
      s.n = 0;
      for (int k = 1; k * mains <= std::min(max_hz, 0.45 * fs) && s.n < kMaxHarmonics; ++k, ++s.n) {
        const double w = 2 * kPi * k * mains / fs;
        s.rot_re[s.n] = std::cos(w);
        s.rot_im[s.n] = std::sin(w);
      }
    }
    mu_min_ = 2.0 / (0.35 * fs);  // time constant ~0.35 s
    n0_ = 0.02 * fs;
    settle_samples_ = static_cast<std::int64_t>(0.5 * fs);
    reset();
  }

  // Returns the input with the active series removed.
  double process(double x) {
    double est_all = 0, est_active = 0;
    for (Series& s : series_) {
      const std::size_t n = s.active ? s.n : 1;
      double est = 0;
      for (std::size_t h = 0; h < n; ++h) est += s.amp_re[h] * s.osc_re[h] - s.amp_im[h] * s.osc_im[h];
      est_all += est;
      if (s.active) est_active += est;
    }
    const double e = x - est_all;
    power_ += 0.5 * mu_ * (x * x - power_);  // mean square of the input, same averaging as the estimates
    for (Series& s : series_) {
      const std::size_t n = s.active ? s.n : 1;
      const double ef = mu_ * e, eh = s.mu * e;
      s.amp_re[0] += ef * s.osc_re[0];
      s.amp_im[0] -= ef * s.osc_im[0];
      for (std::size_t h = 1; h < n; ++h) {
        s.amp_re[h] += eh * s.osc_re[h];
        s.amp_im[h] -= eh * s.osc_im[h];
      }
      for (std::size_t h = 0; h < n; ++h) {  // osc *= rot
        const double re = s.osc_re[h] * s.rot_re[h] - s.osc_im[h] * s.rot_im[h];
        s.osc_im[h] = s.osc_re[h] * s.rot_im[h] + s.osc_im[h] * s.rot_re[h];
        s.osc_re[h] = re;
      }
    }
    if ((++n_ & 63) == 0) update_state();
    return x - est_active;
  }

  // True while the estimates are still converging (the first half second of a stream).
  [[nodiscard]] bool settling() const { return n_ < settle_samples_; }
  [[nodiscard]] bool any_active() const { return series_[0].active || series_[1].active; }

  void reset() {
    for (Series& s : series_) {
      s.osc_re.fill(1.0);
      s.osc_im.fill(0.0);
      s.amp_re.fill(0.0);
      s.amp_im.fill(0.0);
      s.active = false;
      s.active_since = 0;
      s.mu = 0;
    }
    n_ = 0;
    power_ = 0;
    mu_ = gear(0);
  }

 private:
  static constexpr std::size_t kMaxHarmonics = 24;
  struct Series {
    std::array<double, kMaxHarmonics> rot_re{}, rot_im{}, osc_re{}, osc_im{}, amp_re{}, amp_im{};
    std::size_t n = 0;
    bool active = false;
    std::int64_t active_since = 0;
    double mu = 0;  // step size of the harmonics' estimates
  };

  [[nodiscard]] double gear(std::int64_t n) const { return std::max(mu_min_, 2.0 / (static_cast<double>(n) + n0_)); }

  void update_state() {
    for (Series& s : series_) {
      // Oscillators drift off the unit circle by rounding; the running phases of the harmonics that were
      // idle are re-derived from the fundamental's so that they are right when the series switches on.
      for (std::size_t h = 0; h < s.n; ++h) {
        const double r = std::hypot(s.osc_re[h], s.osc_im[h]);
        s.osc_re[h] /= r;
        s.osc_im[h] /= r;
      }
      const double fund_power = 0.5 * (s.amp_re[0] * s.amp_re[0] + s.amp_im[0] * s.amp_im[0]);
      const double share = power_ > 1e-14 ? fund_power / power_ : 0.0;
      const bool on = s.active ? share > 0.005 : share > 0.2;
      if (on && !s.active) {
        const std::complex<double> f(s.osc_re[0], s.osc_im[0]);
        std::complex<double> p = f;
        for (std::size_t h = 1; h < s.n; ++h) {
          p *= f;
          s.osc_re[h] = p.real();
          s.osc_im[h] = p.imag();
          s.amp_re[h] = s.amp_im[h] = 0.0;
        }
        s.active_since = n_;
      }
      s.active = on;
      s.mu = on ? gear(n_ - s.active_since) : 0.0;
    }
    mu_ = gear(n_);  // step sizes change slowly: they are updated every 64 samples
  }

  std::array<Series, 2> series_{};
  double mu_min_ = 0, n0_ = 1;
  double power_ = 0;
  double mu_ = 0;  // step size of the fundamentals' estimates and of the power average
  std::int64_t n_ = 0;
  std::int64_t settle_samples_ = 0;
};

struct Candidate {
  float f0_hz = 0;
  float prob = 0;  // share of the threshold prior that picks this dip
  float bin = 0;   // fractional HMM bin
  float dip = 1;   // value of the normalised difference function at the dip
};

// The early live value of a frame: short-lag candidates from the short window centred on the frame.
struct EarlyRecord {
  std::int64_t index = -1;
  std::array<Candidate, kMaxCandidates> cand{};
  std::array<float, kMaxCandidates> gate{};  // speaker-model gate per candidate
  std::size_t n_cand = 0;
  double pv = 0;  // periodicity evidence, level-gated
  bool emitted = false;
  std::optional<float> live_f0;
  float voicing = 0, confidence = 0;
};

// What the early path says about a frame whose live value is not out yet.
struct EarlyDecision {
  enum Kind { waits, gap, unclear, clear } kind = waits;  // waits: unvoiced or below the short window's lags
  std::optional<float> f0;
  float voicing = 0, confidence = 0;
};

// Everything remembered about a frame until its settled value is out.
struct FrameRecord {
  std::int64_t index = -1;
  double time_s = 0;
  std::array<Candidate, kMaxCandidates> cand{};
  std::size_t n_cand = 0;
  std::optional<float> live_f0;
  float voicing = 0, confidence = 0, level_dbfs = -200;
};

double beta_pdf_unnormalized(double x, double a, double b) { return std::pow(x, a - 1) * std::pow(1 - x, b - 1); }

}  // namespace

std::string TrackerConfig::validate() const {
  auto bad = [](const char* field, double v, const char* allowed) {
    return std::string(field) + " = " + std::to_string(v) + " is out of range; allowed: " + allowed;
  };
  if (!(sample_rate_hz >= 8000 && sample_rate_hz <= 96000)) return bad("sample_rate_hz", sample_rate_hz, "8000 to 96000");
  if (!(hop_ms >= 2.5 && hop_ms <= 10)) return bad("hop_ms", hop_ms, "2.5 to 10");
  if (!(f0_min_hz >= 30 && f0_min_hz <= 500)) return bad("f0_min_hz", f0_min_hz, "30 to 500");
  if (!(f0_max_hz > f0_min_hz * 1.5 && f0_max_hz <= 2000))
    return bad("f0_max_hz", f0_max_hz, "more than 1.5 x f0_min_hz, at most 2000");
  if (!(f0_max_hz < 0.4 * std::min(sample_rate_hz, kAnalysisRateHz)))
    return bad("f0_max_hz", f0_max_hz, "below 0.4 x the sample rate");
  if (!(settle_ms >= 0 && settle_ms <= 500)) return bad("settle_ms", settle_ms, "0 to 500");
  if (!(level_floor_dbfs >= -140 && level_floor_dbfs <= -10)) return bad("level_floor_dbfs", level_floor_dbfs, "-140 to -10");
  return {};
}

struct PitchTracker::Impl {
  TrackerConfig cfg;
  double fs = 0;        // input rate
  double fa = 0;        // analysis rate
  double hop_a = 0;     // hop in analysis samples (may be fractional)
  int tau_min = 0, tau_max = 0, span = 0, half = 0;

  // Resampler (only when fs > analysis rate).
  SRC_STATE* resampler = nullptr;  // libsamplerate, when the input rate is above the analysis rate
  std::vector<float> rs_out;

  // Filters.
  Biquad hp, lp1, lp2;
  HumCanceller hum;

  // Analysis buffer: buf[i] holds analysis sample buf_start + i.
  std::vector<float> buf;
  std::vector<float> hum_removed;  // what the hum canceller took out, same indexing as buf
  std::int64_t last_hum_sample = -1;  // analysis index of the last sample the canceller changed
  std::size_t buf_len = 0;
  std::int64_t buf_start = 0;
  std::int64_t analysis_count = 0;  // analysis samples produced so far (excluding the initial padding)

  // Difference-function scratch for one window length: the full window (every lag) and the short
  // window of the early live value (short lags only).
  // FFT (KissFFT, real transforms): set up in microseconds, so a short file costs no planning time.
  struct YinWork {
    int span = 0, tau_hi = 0, nfft = 0;
    kiss_fftr_cfg fwd = nullptr, inv = nullptr;
    std::vector<float> fft_in;   // frame in the first span samples, zeros after (set once)
    std::vector<float> fft_out;  // autocorrelation times nfft
    std::vector<kiss_fft_cpx> spec;
    std::vector<double> cum_sq, diff, cmnd;

    void init(int window, int max_lag) {
      span = window;
      tau_hi = max_lag;
      nfft = 1;
      while (nfft < span + tau_hi + 2) nfft <<= 1;  // no circular wrap for lags up to tau_hi + 1
      fwd = kiss_fftr_alloc(nfft, 0, nullptr, nullptr);
      inv = kiss_fftr_alloc(nfft, 1, nullptr, nullptr);
      if (!fwd || !inv) throw std::runtime_error("FFT setup failed");
      fft_in.assign(static_cast<std::size_t>(nfft), 0.0f);
      fft_out.assign(static_cast<std::size_t>(nfft), 0.0f);
      spec.assign(static_cast<std::size_t>(nfft / 2 + 1), kiss_fft_cpx{});
      cum_sq.resize(static_cast<std::size_t>(span) + 1);
      diff.resize(static_cast<std::size_t>(tau_hi) + 2);
      cmnd.resize(static_cast<std::size_t>(tau_hi) + 2);
    }
    void release() {
      kiss_fftr_free(fwd);
      kiss_fftr_free(inv);
      fwd = inv = nullptr;
    }
  };
  YinWork yin_full, yin_early;

  // Threshold prior: its cumulative distribution at 0, 1/kThresholds, ..., 1.
  std::array<double, kThresholds + 1> thr_cum{};

  // Prior mass on thresholds below s (linear between the tabulated points).
  [[nodiscard]] double thr_cdf(double s) const {
    const double pos = std::clamp(s, 0.0, 1.0) * kThresholds;
    const auto i = std::min(static_cast<std::size_t>(pos), kThresholds - 1);
    const double f = pos - static_cast<double>(i);
    return thr_cum[i] + f * (thr_cum[i + 1] - thr_cum[i]);
  }

  // Level bins: sum of squares over half hops of input.
  std::vector<double> lvl_sum;  // ring of completed bins
  std::int64_t lvl_bin = 0;
  std::int64_t lvl_next_boundary = 0;
  double lvl_acc = 0;
  std::int64_t input_count = 0;
  std::int64_t nonfinite = 0;

  // HMM.
  int n_bins = 0, jump = 0;
  double bin0_cents = 0;  // cents re 1 Hz of bin 0's centre
  std::vector<float> kernel, delta, delta_new, obs, arg_scratch;
  std::vector<float> bin_index;  // 0, 1, 2, ... as floats
  std::size_t best_voiced_bin = 0;  // voiced state with the best score after the latest step
  std::vector<double> speaker_hist;  // speaker model: decaying, level-weighted histogram of live F0 bins
  double speaker_total = 0;      // in units of speaker_unit, like the bins
  double speaker_unit = 1.0;     // weight of a frame added now, relative to the stored bins
  double speaker_decay = 1.0;    // per-frame decay, exp(-hop / kSpeakerMemoryS)
  std::vector<int> speaker_dist;            // scratch: distance to the nearest known bin
  std::vector<std::uint8_t> speaker_near;   // 1 where a bin is within kFarCents of a known bin
  std::vector<std::size_t> path_scratch;
  std::array<double, kSettleSmoothReach> raw_history{};  // path F0 of the last settled frames, newest first
  std::vector<std::int16_t> backptr;  // ring [ring_len][n_bins + 1]
  int settle = 0, ring_len = 0;
  std::vector<FrameRecord> records;
  // Early live value (see early_frame()); tau_early == 0 when the configuration leaves no room for it.
  int tau_early = 0, span_early = 0, half_early = 0;
  double early_lo_bin = 0;                 // bins below this lie outside the short window's lags
  std::vector<EarlyRecord> early;          // ring over the frames between the full and the early frontier
  std::vector<float> e_delta, e_new, e_obs, e_arg;
  std::int64_t next_early = 0;             // next hop whose short window is awaited
  std::int64_t next_live = 0;              // next hop whose live frame is to be emitted
  std::int64_t live_limit = 0;             // last hop that gets a live frame (known at flush)
  std::vector<EarlyDecision> early_dec;     // release_early(): the decision for each pending early frame
  std::int64_t next_frame = 0;      // next hop to analyse
  std::int64_t next_settled = 0;    // next hop to settle
  bool hmm_started = false;
  double peak_db = -200;

  explicit Impl(const TrackerConfig& c) : cfg(c) {
    if (auto err = cfg.validate(); !err.empty()) throw std::invalid_argument(err);
    fs = cfg.sample_rate_hz;
    fa = fs > kAnalysisRateHz ? kAnalysisRateHz : fs;
    hop_a = cfg.hop_ms * 1e-3 * fa;
    tau_min = std::max(2, static_cast<int>(std::floor(fa / cfg.f0_max_hz)));
    tau_max = static_cast<int>(std::ceil(fa / cfg.f0_min_hz));
    span = 2 * tau_max + 2;        // window: two longest periods (one period left at the longest lag)
    half = span / 2;

    if (fa != fs) {
      // libsamplerate's fastest band-limited sinc (97 dB SNR, 80 % of the output band passed, the
      // analysis band ends at 1.8 kHz): a time-domain filter that releases each output sample as soon as
      // its input is in, half the filter (2.4 ms at 48 kHz to 8 kHz) after it, and keeps its output on the
      // input's clock. libsoxr, used before, filters in DFT blocks and held its output back 5.7 ms on
      // average and 9 ms at most (256-point blocks, its smallest), which the live value paid for.
      int err = 0;
      resampler = src_new(SRC_SINC_FASTEST, 1, &err);
      if (resampler == nullptr) throw std::runtime_error(std::string("resampler: ") + src_strerror(err));
      rs_out.resize(4096);
    }
    hp = Biquad::highpass(kHighpassHz, fa, 0.70710678);
    const double lp_hz = std::min(kLowpassHz, 0.45 * fa);
    lp1 = Biquad::lowpass(lp_hz, fa, 0.54119610);  // 4th-order Butterworth as two sections
    lp2 = Biquad::lowpass(lp_hz, fa, 1.30656296);
    hum = HumCanceller(fa, kHumMaxHz);

    buf.assign(static_cast<std::size_t>(span) + 8192, 0.0f);
    hum_removed.assign(buf.size(), 0.0f);

    yin_full.init(span, tau_max);

    // Threshold prior: Beta distribution over the CMNDF threshold (probabilistic YIN, Mauch & Dixon 2014).
    thr_cum[0] = 0;
    for (std::size_t i = 0; i < kThresholds; ++i) {
      const double s = (static_cast<double>(i) + 0.5) / kThresholds;
      thr_cum[i + 1] = thr_cum[i] + beta_pdf_unnormalized(s, kPriorA, kPriorB);
    }
    for (auto& v : thr_cum) v /= thr_cum[kThresholds];

    lvl_sum.assign(1024, 0.0);

    bin0_cents = 1200.0 * std::log2(cfg.f0_min_hz);
    n_bins = static_cast<int>(std::ceil(1200.0 * std::log2(cfg.f0_max_hz / cfg.f0_min_hz) / kBinCents)) + 1;
    jump = std::max(1, static_cast<int>(std::ceil(kMaxSlopeStPerS * 100.0 * cfg.hop_ms * 1e-3 / kBinCents)));
    // Pitch transition kernel: Gaussian in bins, peak 1, cut at the slope limit.
    kernel.resize(static_cast<std::size_t>(2 * jump + 1));
    const double sigma = std::max(1.0, jump / 2.5);
    for (int d = -jump; d <= jump; ++d)
      kernel[static_cast<std::size_t>(d + jump)] = static_cast<float>(std::exp(-0.5 * (d / sigma) * (d / sigma)));
    const auto states = static_cast<std::size_t>(n_bins) + 1;
    delta.assign(states, 0);
    delta_new.assign(states, 0);
    arg_scratch.assign(states, 0);
    speaker_hist.assign(static_cast<std::size_t>(n_bins), 0.0);
    speaker_decay = std::exp(-cfg.hop_ms * 1e-3 / kSpeakerMemoryS);
    speaker_dist.assign(static_cast<std::size_t>(n_bins), 0);
    speaker_near.assign(static_cast<std::size_t>(n_bins), 1);
    bin_index.resize(states);
    for (std::size_t b = 0; b < states; ++b) bin_index[b] = static_cast<float>(b);
    obs.assign(states, 0);
    settle = static_cast<int>(std::lround(cfg.settle_ms / cfg.hop_ms));
    ring_len = settle + 2;
    backptr.assign(static_cast<std::size_t>(ring_len) * states, 0);
    records.assign(static_cast<std::size_t>(ring_len), FrameRecord{});
    path_scratch.assign(static_cast<std::size_t>(ring_len), 0);
    // Early live value: a short window for short lags, centred on the frame like the full one.
    tau_early = static_cast<int>(std::ceil(kEarlyMaxLagS * fa));
    if (tau_early >= tau_min + 4 && tau_early + 8 <= tau_max) {
      span_early = 2 * tau_early + 2;
      half_early = span_early / 2;
      yin_early.init(span_early, tau_early);
      early_lo_bin = bin_of(fa / tau_early);
      const auto lead = static_cast<std::size_t>(std::ceil((half - half_early) / hop_a)) + 4;
      early.assign(lead, EarlyRecord{});
      early_dec.assign(lead, EarlyDecision{});
      e_delta.assign(states, 0);
      e_new.assign(states, 0);
      e_obs.assign(states, 0);
      e_arg.assign(states, 0);
    } else {
      tau_early = 0;
    }
    reset();
  }

  ~Impl() {
    yin_full.release();
    yin_early.release();
    if (resampler) src_delete(resampler);
  }

  void reset() {
    if (resampler) src_reset(resampler);
    hp.reset();
    lp1.reset();
    lp2.reset();
    hum.reset();
    std::fill(buf.begin(), buf.end(), 0.0f);
    std::fill(hum_removed.begin(), hum_removed.end(), 0.0f);
    last_hum_sample = -1;
    buf_len = static_cast<std::size_t>(half) + 1;  // zeros before time 0
    buf_start = -static_cast<std::int64_t>(buf_len);
    analysis_count = 0;
    std::fill(lvl_sum.begin(), lvl_sum.end(), 0.0);
    lvl_bin = 0;
    lvl_next_boundary = level_boundary(1);
    lvl_acc = 0;
    input_count = 0;
    nonfinite = 0;
    next_frame = 0;
    next_settled = 0;
    next_early = 0;
    next_live = 0;
    live_limit = std::numeric_limits<std::int64_t>::max();
    for (auto& e : early) e = EarlyRecord{};
    hmm_started = false;
    best_voiced_bin = 0;
    raw_history.fill(0.0);
    std::fill(speaker_hist.begin(), speaker_hist.end(), 0.0);
    speaker_total = 0;
    speaker_unit = 1.0;
    peak_db = -200;
  }

  // Level bins are half hops: bin j covers input time [(j - 1) h/2, j h/2), so frame k (centred on k h)
  // covers bins 2k and 2k + 1. This is the input sample index where bin j begins.
  [[nodiscard]] std::int64_t level_boundary(std::int64_t j) const {
    return static_cast<std::int64_t>(std::llround((static_cast<double>(j) - 1.0) * 0.5 * cfg.hop_ms * 1e-3 * fs));
  }

  // Adds one input sample's square to the bin it belongs to; lvl_bin is the bin being filled.
  void level_push(double x2) {
    while (input_count >= lvl_next_boundary) {
      const auto slot = static_cast<std::size_t>(lvl_bin % static_cast<std::int64_t>(lvl_sum.size()));
      lvl_sum[slot] = lvl_acc;
      lvl_acc = 0;
      ++lvl_bin;
      lvl_next_boundary = level_boundary(lvl_bin + 1);
    }
    lvl_acc += x2;
    ++input_count;
  }

  [[nodiscard]] float frame_level_dbfs(std::int64_t k) const {
    // Frame k covers input time [(k - 0.5) hop, (k + 0.5) hop): bins 2k and 2k + 1.
    double sum = 0;
    for (std::int64_t j = 2 * k; j <= 2 * k + 1; ++j) {
      if (j < 0 || j >= lvl_bin) continue;
      sum += lvl_sum[static_cast<std::size_t>(j % static_cast<std::int64_t>(lvl_sum.size()))];
    }
    const double n = cfg.hop_ms * 1e-3 * fs;
    const double ms = sum / n;
    // AES17: a full-scale sine (mean square 0.5) reads 0 dBFS.
    return ms > 1e-20 ? static_cast<float>(10.0 * std::log10(2.0 * ms)) : -200.0f;
  }

  void push_analysis(const float* x, std::size_t n, FrameSink& sink) {
    while (n > 0) {
      const std::size_t room = buf.size() - buf_len;
      const std::size_t take = std::min(room, n);
      for (std::size_t i = 0; i < take; ++i) {
        const double pre = hp.process(x[i]);
        const double v = cfg.hum_cancel ? hum.process(pre) : pre;
        const auto removed = static_cast<float>(pre - v);
        hum_removed[buf_len + i] = removed;
        if (removed != 0.0f) last_hum_sample = buf_start + static_cast<std::int64_t>(buf_len + i);
        buf[buf_len + i] = static_cast<float>(lp2.process(lp1.process(v)));
      }
      buf_len += take;
      analysis_count += static_cast<std::int64_t>(take);
      x += take;
      n -= take;
      run_frames(sink);
      compact();
    }
  }

  void push_analysis_zeros(std::size_t n, FrameSink& sink) {
    static constexpr std::array<float, 256> zeros{};
    while (n > 0) {
      const std::size_t take = std::min(n, zeros.size());
      push_analysis(zeros.data(), take, sink);
      n -= take;
    }
  }

  // Keep only what the next frame still needs.
  void compact() {
    const std::int64_t need_from = frame_start(next_frame);
    const std::int64_t drop = need_from - buf_start;
    if (drop <= 0 || buf_len < buf.size() / 2) return;
    const auto d = static_cast<std::size_t>(std::min<std::int64_t>(drop, static_cast<std::int64_t>(buf_len)));
    std::copy(buf.begin() + static_cast<std::ptrdiff_t>(d), buf.begin() + static_cast<std::ptrdiff_t>(buf_len), buf.begin());
    std::copy(hum_removed.begin() + static_cast<std::ptrdiff_t>(d),
              hum_removed.begin() + static_cast<std::ptrdiff_t>(buf_len), hum_removed.begin());
    buf_len -= d;
    buf_start += static_cast<std::int64_t>(d);
  }

  [[nodiscard]] std::int64_t frame_centre(std::int64_t k) const {
    return static_cast<std::int64_t>(std::llround(static_cast<double>(k) * hop_a));
  }
  [[nodiscard]] std::int64_t frame_start(std::int64_t k) const { return frame_centre(k) - half; }

  // Full and short windows complete in the order of their last sample (full first on a tie), so that
  // frames are the same whatever the block sizes.
  void run_frames(FrameSink& sink) {
    const std::int64_t avail = buf_start + static_cast<std::int64_t>(buf_len);
    for (;;) {
      const std::int64_t full_need = frame_start(next_frame) + span;
      const std::int64_t early_need = tau_early > 0 ? frame_centre(next_early) - half_early + span_early
                                                    : std::numeric_limits<std::int64_t>::max();
      if (full_need <= early_need) {
        if (full_need > avail) break;
        analyse_frame(next_frame, sink);
        ++next_frame;
      } else {
        if (early_need > avail) break;
        // release_early() decodes the frames before this one: a frame's early value is decided when the
        // next window completes (with the default 5 ms hop, the full window of the frame 10 ms earlier,
        // 2 ms later), which gives its path one more full frame of evidence. Deciding at once was 2 ms
        // sooner but cost 0.002 of live RPA on the quick corpus (0.9174 -> 0.9154).
        early_frame(next_early, sink);
        ++next_early;
      }
    }
  }

  [[nodiscard]] double bin_of(double f) const { return (1200.0 * std::log2(f) - bin0_cents) / kBinCents; }
  [[nodiscard]] double f_of_bin(double b) const { return std::exp2((bin0_cents + b * kBinCents) / 1200.0); }

  // YIN difference function through the FFT and its cumulative mean normalised form (de Cheveigne &
  // Kawahara 2002, steps 2 and 3), then candidates from a distribution over thresholds (Mauch & Dixon 2014).
  // The difference function is the windowed form d(tau) = sum_{j < S - tau} (x_j - x_{j+tau})^2 over one
  // window of S samples centred on the frame time, divided by its S - tau terms: every lag then describes
  // the same stretch of signal, so the frame time is the window centre whatever the period.
  std::size_t yin_candidates(const float* x, YinWork& work, std::array<Candidate, kMaxCandidates>& out, double& level_db,
                             double& best_d, double& centre_db) {
    const auto S = static_cast<std::size_t>(work.span);
    std::vector<float>& fft_in = work.fft_in;
    std::vector<float>& fft_out = work.fft_out;
    std::vector<kiss_fft_cpx>& spec = work.spec;
    std::vector<double>& cum_sq = work.cum_sq;
    std::vector<double>& diff = work.diff;
    std::vector<double>& cmnd = work.cmnd;
    double mean = 0;
    for (std::size_t i = 0; i < S; ++i) mean += x[i];
    mean /= static_cast<double>(S);
    cum_sq[0] = 0;
    for (std::size_t i = 0; i < S; ++i) {
      const double v = x[i] - mean;
      fft_in[i] = static_cast<float>(v);
      cum_sq[i + 1] = cum_sq[i] + v * v;
    }
    kiss_fftr(work.fwd, fft_in.data(), spec.data());
    for (auto& c : spec) {
      c.r = c.r * c.r + c.i * c.i;
      c.i = 0;
    }
    kiss_fftri(work.inv, spec.data(), fft_out.data());  // fft_out[tau] = nfft * sum_j x_j x_{j+tau}
    const double total = cum_sq[S];
    const double scale = 1.0 / work.nfft;
    level_db = total > 1e-20 ? 10.0 * std::log10(2.0 * total / static_cast<double>(S)) : -200.0;
    {
      // Level of the middle of the window (+-1 hop): where the frame's time actually is.
      const auto h = static_cast<std::size_t>(std::max(1.0, hop_a));
      const std::size_t mid = S / 2, lo = mid > h ? mid - h : 0, hi = std::min(S, mid + h);
      const double e = cum_sq[hi] - cum_sq[lo];
      centre_db = e > 1e-20 ? 10.0 * std::log10(2.0 * e / static_cast<double>(hi - lo)) : -200.0;
    }
    const auto tmax = static_cast<std::size_t>(work.tau_hi) + 1;
    diff[0] = 0;
    cmnd[0] = 1;
    double running = 0;
    for (std::size_t tau = 1; tau <= tmax; ++tau) {
      const double head = cum_sq[S - tau];
      const double tail = total - cum_sq[tau];
      const double d = std::max(0.0, head + tail - 2.0 * fft_out[tau] * scale) / static_cast<double>(S - tau);
      diff[tau] = d;
      running += d;
      cmnd[tau] = running > 0 ? d * static_cast<double>(tau) / running : 1.0;
    }

    // Local minima of the CMNDF within the search range, refined to a fraction of a sample.
    struct Dip {
      double tau, value;
    };
    std::array<Dip, 64> dips{};
    std::size_t n_dips = 0;
    const auto tlo = static_cast<std::size_t>(tau_min);
    const auto thi = static_cast<std::size_t>(work.tau_hi);
    for (std::size_t t = tlo; t <= thi && n_dips < dips.size(); ++t) {
      if (cmnd[t] < cmnd[t - 1] && cmnd[t] <= cmnd[t + 1]) {
        // Sub-sample period (YIN step 5). Near its minimum the difference function of a periodic signal
        // is a raised cosine in the lag, d(t0 + x) = A - B cos(w (x - s)) with w = 2 pi / period; fitting
        // that through the three samples around the dip is exact for a sinusoid at any sampling density
        // and tends to parabolic interpolation when the period spans many samples.
        const double a = diff[t - 1], b = diff[t], c = diff[t + 1];
        const double den = a + c - 2 * b;
        double shift = 0.0;
        if (den > 0) {
          const double w = 2 * kPi / static_cast<double>(t);
          shift = std::atan((a - c) / den * (1 - std::cos(w)) / std::sin(w)) / w;
          shift = std::clamp(shift, -0.5, 0.5);
        }
        const double ca = cmnd[t - 1], cb = cmnd[t], cc = cmnd[t + 1];
        const double value = std::clamp(cb - 0.25 * (ca - cc) * shift, 0.0, cb);
        dips[n_dips++] = {static_cast<double>(t) + shift, value};
      }
    }
    best_d = 1.0;
    std::size_t n = 0;
    if (n_dips == 0) return 0;
    std::size_t global = 0;
    for (std::size_t i = 1; i < n_dips; ++i)
      if (dips[i].value < dips[global].value) global = i;
    best_d = dips[global].value;
    // For each threshold the first dip below it wins (YIN step 4). Dip j therefore wins every threshold
    // between its own value and the lowest value of the dips before it: its probability is the prior's
    // mass on that interval.
    std::array<double, 64> prob{};
    double lowest_before = 1.0;
    for (std::size_t j = 0; j < n_dips; ++j) {
      if (dips[j].value < lowest_before) {
        prob[j] = thr_cdf(lowest_before) - thr_cdf(dips[j].value);
        lowest_before = dips[j].value;
      }
    }
    // Thresholds below every dip: probabilistic YIN gives the global minimum a 0.01 share. When the
    // signal is noisy every dip is shallow and the global minimum falls on the period or on a multiple
    // of it almost by chance; the earliest dip nearly as deep takes that share instead, as YIN's own rule
    // prefers the shortest lag.
    std::size_t fallback = global;
    // The normalisation (cumulative mean) deepens dips at longer lags a little when all dips are shallow,
    // hence a tolerance relative to the deepest value too.
    const double tolerance = dips[global].value + std::max(0.1 * (1.0 - dips[global].value), 0.35 * dips[global].value);
    for (std::size_t j = 0; j < global; ++j)
      if (dips[j].value <= tolerance) {
        fallback = j;
        break;
      }
    prob[fallback] += 0.01 * thr_cdf(dips[global].value);
    // Keep the most probable candidates.
    for (std::size_t k = 0; k < kMaxCandidates; ++k) {
      std::size_t best = n_dips;
      for (std::size_t j = 0; j < n_dips; ++j)
        if (prob[j] > 1e-6 && (best == n_dips || prob[j] > prob[best])) best = j;
      if (best == n_dips) break;
      const double f = fa / dips[best].tau;
      if (f >= cfg.f0_min_hz * 0.97 && f <= cfg.f0_max_hz * 1.03) {
        out[n++] = {static_cast<float>(f), static_cast<float>(prob[best]), static_cast<float>(bin_of(f)),
                    static_cast<float>(dips[best].value)};
      }
      prob[best] = 0;
    }
    return n;
  }

  void analyse_frame(std::int64_t k, FrameSink& sink) {
    const std::int64_t start = frame_start(k);
    const float* x = buf.data() + (start - buf_start);
    FrameRecord& rec = records[static_cast<std::size_t>(k % ring_len)];
    rec = FrameRecord{};
    rec.index = k;
    rec.time_s = static_cast<double>(frame_centre(k)) / fa;
    rec.level_dbfs = frame_level_dbfs(k);
    double level_db = -200, best_d = 1, centre_db = -200;
    rec.n_cand = yin_candidates(x, yin_full, rec.cand, level_db, best_d, centre_db);

    // Voicing evidence: candidate probability mass, gated by level (absolute floor and relative to the
    // recent peak of periodic frames, so that a far quieter background is not taken for the voice).
    // Periodicity evidence: how deep the deepest candidate dip is. Candidate probabilities (which period)
    // and this evidence (whether periodic at all) are kept apart, so that noise that makes every dip
    // shallower lowers the voicing evidence without handing the frame to a wrong period.
    // Start-up guard: until the hum canceller has converged, a periodicity at the mains frequency itself
    // (50 or 60 Hz within 1.5 %) is not trusted.
    const bool guard = cfg.hum_cancel && hum.settling();
    double deepest = 1.0;
    for (std::size_t i = 0; i < rec.n_cand; ++i) {
      const double f = rec.cand[i].f0_hz;
      if (guard && (std::abs(f / 50.0 - 1.0) < 0.015 || std::abs(f / 60.0 - 1.0) < 0.015)) {
        rec.cand[i].prob *= 0.02f;
        continue;
      }
      deepest = std::min(deepest, static_cast<double>(rec.cand[i].dip));
    }
    auto sigmoid = [](double z) { return 1.0 / (1.0 + std::exp(-z)); };
    double pv = sigmoid((kVoicedDip - deepest) / kVoicedDipWidth);
    const double hop_s = cfg.hop_ms * 1e-3;
    peak_db = std::max(peak_db - kPeakDecayDbPerS * hop_s, -200.0);
    if (best_d < 0.15 && level_db > cfg.level_floor_dbfs) peak_db = std::max(peak_db, level_db);
    // What is left where the hum canceller removed far more than it left is hum residue, not a voice.
    // A frame whose middle is far quieter than its whole window only borrows periodicity from a voiced
    // stretch next to it (the window reaches 20 ms either side): that places voicing boundaries to a hop.
    double removed = 0;
    if (last_hum_sample >= start) {
      const float* h = hum_removed.data() + (start - buf_start);
      for (int i = 0; i < span; ++i) removed += static_cast<double>(h[i]) * h[i];
    }
    const double removed_db = removed > 1e-20 ? 10.0 * std::log10(2.0 * removed / span) : -200.0;
    const double gate = sigmoid((level_db - cfg.level_floor_dbfs) / 2.0) *
                        sigmoid((level_db - (peak_db - kLevelGateBelowPeakDb)) / 3.0) *
                        sigmoid((level_db - (removed_db - 6.0)) / 2.0) *
                        sigmoid((centre_db - (level_db - kCentreBelowWindowDb)) / 2.0);
    pv *= gate;
    pv = std::clamp(pv, 1e-4, 0.9999);

    // Observation probabilities: pv near the likeliest candidate, less near the others in proportion to
    // their probability, a small floor elsewhere; 1 - pv for the unvoiced state.
    const auto U = static_cast<std::size_t>(n_bins);
    double wsum = 0;
    for (std::size_t i = 0; i < rec.n_cand; ++i) wsum += rec.cand[i].prob;
    std::fill(obs.begin(), obs.begin() + static_cast<std::ptrdiff_t>(U), static_cast<float>(pv * 1e-3 / n_bins));
    double wmax = 0;
    for (std::size_t i = 0; i < rec.n_cand; ++i) wmax = std::max(wmax, static_cast<double>(rec.cand[i].prob));
    // Speaker model: a candidate far in pitch from every register the followed voice has used (see
    // speaker_refresh()) must also be nearly as loud as that voice's recent peak, so that a quieter
    // second voice in the room is not taken for the speaker in the speaker's pauses.
    speaker_refresh();
    const double far_gate = sigmoid((level_db - (peak_db - kFarBelowPeakDb)) / 2.0);
    double pv_eff = 0;
    std::array<double, kMaxCandidates> cand_gate{};
    for (std::size_t i = 0; i < rec.n_cand; ++i) {
      const auto cb = static_cast<std::size_t>(std::clamp(std::lround(rec.cand[i].bin), 0L, static_cast<long>(n_bins - 1)));
      const bool far = speaker_near[cb] == 0;
      cand_gate[i] = far ? far_gate : 1.0;
      if (wmax > 0) pv_eff = std::max(pv_eff, pv * cand_gate[i] * rec.cand[i].prob / wmax);
    }
    for (std::size_t i = 0; i < rec.n_cand && wmax > 0; ++i) {
      // The likeliest candidate carries the full evidence.
      const double w = pv * cand_gate[i] * rec.cand[i].prob / wmax;
      const double cb = rec.cand[i].bin;
      const int lo = std::max(0, static_cast<int>(std::floor(cb)) - 2);
      const int hi = std::min(n_bins - 1, static_cast<int>(std::ceil(cb)) + 2);
      for (int b = lo; b <= hi; ++b) {
        const double dc = (b - cb) * kBinCents / 25.0;
        auto& o = obs[static_cast<std::size_t>(b)];
        o = std::max(o, static_cast<float>(w * std::exp(-0.5 * dc * dc)));
      }
    }
    obs[U] = static_cast<float>(1.0 - std::min(pv_eff, 0.9999));

    hmm_step(k);

    // Live value: the best path ending at this frame (zero-lag max-product decoding).
    const float best_voiced = delta[best_voiced_bin];
    const std::size_t best_bin = best_voiced_bin;
    rec.voicing = best_voiced / (best_voiced + delta[U]);
    if (best_voiced > delta[U]) {
      const std::size_t c = nearest_candidate(rec, best_bin);
      rec.live_f0 = c < rec.n_cand ? rec.cand[c].f0_hz : static_cast<float>(f_of_bin(static_cast<double>(best_bin)));
      rec.confidence = c < rec.n_cand && wsum > 0 ? static_cast<float>(pv * rec.cand[c].prob / wsum) : 0.0f;
    }
    speaker_update(rec.live_f0 ? bin_of(*rec.live_f0) : -1.0, level_db);
    if (k < next_live) {
      // Already published from the short window: the settled frame carries what was published.
      const EarlyRecord& e = early[static_cast<std::size_t>(k % static_cast<std::int64_t>(early.size()))];
      rec.live_f0 = e.live_f0;
      rec.voicing = e.voicing;
      rec.confidence = e.confidence;
    } else {
      LiveFrame live;
      live.index = k;
      live.time_s = rec.time_s;
      live.f0_hz = rec.live_f0;
      live.voicing = rec.voicing;
      live.confidence = rec.confidence;
      live.level_dbfs = rec.level_dbfs;
      sink.on_live(live);
      next_live = k + 1;
    }
    if (tau_early > 0) release_early(sink);

    if (k - next_settled >= settle) settle_from(k, k - settle, sink);
  }

  // Early live value. The full window reaches T_max (20 ms) past the frame centre, so the live value of
  // a high voice would wait for lags it does not need. The same difference function over a short window
  // (lags up to kEarlyMaxLagS, window of two such lags, centred on the frame like the full one: the
  // frame time stays the window centre) is complete 12 ms sooner. Its candidates and evidence (the same
  // gates as a full frame's) are kept per frame; release_early() decodes them on top of the full path.
  void early_frame(std::int64_t k, FrameSink& sink) {
    EarlyRecord& e = early[static_cast<std::size_t>(k % static_cast<std::int64_t>(early.size()))];
    e = EarlyRecord{};
    e.index = k;
    const std::int64_t start = frame_centre(k) - half_early;
    const float* x = buf.data() + (start - buf_start);
    double level_db = -200, best_d = 1, centre_db = -200;
    e.n_cand = yin_candidates(x, yin_early, e.cand, level_db, best_d, centre_db);
    const bool guard = cfg.hum_cancel && hum.settling();
    double deepest = 1.0;
    for (std::size_t i = 0; i < e.n_cand; ++i) {
      const double f = e.cand[i].f0_hz;
      if (guard && (std::abs(f / 50.0 - 1.0) < 0.015 || std::abs(f / 60.0 - 1.0) < 0.015)) {
        e.cand[i].prob *= 0.02f;
        continue;
      }
      deepest = std::min(deepest, static_cast<double>(e.cand[i].dip));
    }
    auto sigmoid = [](double z) { return 1.0 / (1.0 + std::exp(-z)); };
    double pv = sigmoid((kVoicedDip - deepest) / kVoicedDipWidth);
    double removed = 0;
    if (last_hum_sample >= start) {
      const float* h = hum_removed.data() + (start - buf_start);
      for (int i = 0; i < span_early; ++i) removed += static_cast<double>(h[i]) * h[i];
    }
    const double removed_db = removed > 1e-20 ? 10.0 * std::log10(2.0 * removed / span_early) : -200.0;
    const double gate = sigmoid((level_db - cfg.level_floor_dbfs) / 2.0) *
                        sigmoid((level_db - (peak_db - kLevelGateBelowPeakDb)) / 3.0) *
                        sigmoid((level_db - (removed_db - 6.0)) / 2.0) *
                        sigmoid((centre_db - (level_db - kCentreBelowWindowDb)) / 2.0);
    e.pv = std::clamp(pv * gate, 1e-4, 0.9999);
    speaker_refresh();
    const double far_gate = sigmoid((level_db - (peak_db - kFarBelowPeakDb)) / 2.0);
    for (std::size_t i = 0; i < e.n_cand; ++i) {
      const auto cb = static_cast<std::size_t>(std::clamp(std::lround(e.cand[i].bin), 0L, static_cast<long>(n_bins - 1)));
      e.gate[i] = speaker_near[cb] == 0 ? static_cast<float>(far_gate) : 1.0f;
    }
    release_early(sink);
  }

  // Observation probabilities of an early frame, as for a full frame; bins below the short window's
  // lags carry no evidence either way (kEarlyUnknownObs), so a low voice's path is not pulled away.
  void early_obs(const EarlyRecord& e) {
    const auto U = static_cast<std::size_t>(n_bins);
    const double pv = e.pv;
    double wmax = 0, pv_eff = 0;
    for (std::size_t i = 0; i < e.n_cand; ++i) wmax = std::max(wmax, static_cast<double>(e.cand[i].prob));
    const auto lo = static_cast<std::size_t>(std::clamp(static_cast<int>(std::ceil(early_lo_bin)), 0, n_bins));
    std::fill(e_obs.begin(), e_obs.begin() + static_cast<std::ptrdiff_t>(lo), kEarlyUnknownObs);
    std::fill(e_obs.begin() + static_cast<std::ptrdiff_t>(lo), e_obs.begin() + static_cast<std::ptrdiff_t>(U),
              static_cast<float>(pv * 1e-3 / n_bins));
    for (std::size_t i = 0; i < e.n_cand && wmax > 0; ++i) {
      const double w = pv * e.gate[i] * e.cand[i].prob / wmax;
      pv_eff = std::max(pv_eff, w);
      const double cb = e.cand[i].bin;
      const int blo = std::max(static_cast<int>(lo), static_cast<int>(std::floor(cb)) - 2);
      const int bhi = std::min(n_bins - 1, static_cast<int>(std::ceil(cb)) + 2);
      for (int b = blo; b <= bhi; ++b) {
        const double dc = (b - cb) * kBinCents / 25.0;
        auto& o = e_obs[static_cast<std::size_t>(b)];
        o = std::max(o, static_cast<float>(w * std::exp(-0.5 * dc * dc)));
      }
    }
    e_obs[U] = static_cast<float>(1.0 - std::min(pv_eff, 0.9999));
  }

  // One max-product step over e_delta with e_obs, the transitions of hmm_step(), without back pointers.
  void early_step(std::size_t& best_voiced) {
    const auto U = static_cast<std::size_t>(n_bins);
    const auto stay = static_cast<float>(1 - kVoicingSwitch);
    const float from_unvoiced = e_delta[U] * static_cast<float>(kVoicingSwitch);
    for (std::size_t b = 0; b < U; ++b) e_new[b] = e_delta[b];
    for (int d = -jump; d <= jump; ++d) {
      if (d == 0) continue;
      const float kd = kernel[static_cast<std::size_t>(d + jump)];
      const auto lo = static_cast<std::size_t>(std::max(0, -d));
      const auto hi = static_cast<std::size_t>(std::min(n_bins, n_bins - d));
      const float* src = e_delta.data() + d;
      for (std::size_t b = lo; b < hi; ++b) e_new[b] = std::max(e_new[b], kd * src[b]);
    }
    for (std::size_t b = 0; b < U; ++b) e_new[b] = e_obs[b] * std::max(stay * e_new[b], from_unvoiced);
    e_new[U] = e_obs[U] * std::max(e_delta[best_voiced] * static_cast<float>(kVoicingSwitch), e_delta[U] * stay);
    e_delta.swap(e_new);
    best_voiced = 0;
    for (std::size_t b = 1; b < U; ++b)
      if (e_delta[b] > e_delta[best_voiced]) best_voiced = b;
    const float dmax = std::max(e_delta[best_voiced], e_delta[U]);
    const float inv = dmax > 0 ? 1.0f / dmax : 1.0f;
    for (auto& v : e_delta) v = dmax > 0 ? v * inv : 1.0f;
  }

  // Publishes the live frames that the short windows decide: the best path from the newest full frame
  // on through the early frames (zero-lag max-product decoding as for the full frames). A frame is clear
  // when that path is voiced, within the short window's lags and on one of the frame's short-window
  // candidates whose dip is deeper than kEarlyMaxDip; clear frames are published at once. A frame whose
  // path is voiced but not clear (a shallow dip, no candidate on the path) or unvoiced is published early
  // only when a clear frame follows within kEarlyLookahead hops: a transition between two periodic
  // stretches (an F0 step, a brief aperiodic moment), voiced on the path's value or unvoiced. Otherwise
  // it waits for its full window, and so do the frames after it: live frames keep their order. A lone
  // unvoiced stretch is never published early, since the short window cannot tell a pause from a voice
  // below its lags. (Measured on the quick corpus: without the dip condition, or publishing every
  // unvoiced frame early, the live RPA fell below that of the full window alone; the transition rule
  // costs 0.0008 of live RPA and cuts the 95th percentile of F0-step latency for a male voice from 46.2
  // to 41.4 ms, bench/step_latency, docs/estimator.md.)
  void release_early(FrameSink& sink) {
    if (next_live >= next_early || next_live > live_limit) return;
    const auto U = static_cast<std::size_t>(n_bins);
    const auto ring = static_cast<std::int64_t>(early.size());
    std::size_t bv = best_voiced_bin;
    std::size_t decided = 0;  // early_dec[i] describes frame next_live + i
    std::int64_t j = next_frame;
    for (; j < next_early; ++j) {
      const EarlyRecord& e = early[static_cast<std::size_t>(j % ring)];
      early_obs(e);
      if (hmm_started || j > next_frame) {
        if (j == next_frame) std::copy(delta.begin(), delta.end(), e_delta.begin());
        early_step(bv);
      } else {  // start of the stream: no full frame yet, the first frame's observations start the path
        std::copy(e_obs.begin(), e_obs.end(), e_delta.begin());
        bv = 0;
        for (std::size_t b = 1; b < U; ++b)
          if (e_delta[b] > e_delta[bv]) bv = b;
      }
      if (j < next_live) continue;
      if (j > live_limit || decided == early_dec.size()) break;
      EarlyDecision& d = early_dec[static_cast<std::size_t>(j - next_live)];
      ++decided;
      d = EarlyDecision{};
      d.voicing = e_delta[bv] / (e_delta[bv] + e_delta[U]);
      if (!(e_delta[bv] > e_delta[U])) {
        d.kind = EarlyDecision::gap;  // out early only just before a clear frame (below)
        continue;
      }
      if (static_cast<double>(bv) < early_lo_bin + 2) continue;  // waits
      FrameRecord probe;
      probe.cand = e.cand;
      probe.n_cand = e.n_cand;
      const std::size_t c = nearest_candidate(probe, bv);
      double wsum = 0;
      for (std::size_t i = 0; i < e.n_cand; ++i) wsum += e.cand[i].prob;
      if (c < e.n_cand) {
        d.f0 = e.cand[c].f0_hz;
        d.confidence = wsum > 0 ? static_cast<float>(e.pv * e.cand[c].prob / wsum) : 0.0f;
      } else {
        d.f0 = static_cast<float>(f_of_bin(static_cast<double>(bv)));
      }
      d.kind = c < e.n_cand && e.cand[c].dip <= kEarlyMaxDip ? EarlyDecision::clear : EarlyDecision::unclear;
    }
    // Publish in order: clear frames at once; unclear and gap frames when a clear one follows within
    // kEarlyLookahead hops (a transition between two clear stretches); a frame that waits stops the rest.
    for (std::size_t i = 0; i < decided; ++i) {
      const EarlyDecision& d = early_dec[i];
      if (d.kind == EarlyDecision::waits) break;
      if (d.kind == EarlyDecision::unclear || d.kind == EarlyDecision::gap) {
        bool clear_follows = false;
        for (std::size_t m = i + 1; m < decided && m <= i + kEarlyLookahead; ++m) {
          if (early_dec[m].kind == EarlyDecision::waits) break;
          if (early_dec[m].kind == EarlyDecision::clear) {
            clear_follows = true;
            break;
          }
        }
        if (!clear_follows) break;
      }
      const std::int64_t k = next_live;
      EarlyRecord& w = early[static_cast<std::size_t>(k % ring)];
      w.emitted = true;
      w.live_f0 = d.f0;
      w.voicing = d.voicing;
      w.confidence = d.confidence;
      LiveFrame live;
      live.index = k;
      live.time_s = static_cast<double>(frame_centre(k)) / fa;
      live.f0_hz = w.live_f0;
      live.voicing = w.voicing;
      live.confidence = w.confidence;
      live.level_dbfs = frame_level_dbfs(k);
      sink.on_live(live);
      next_live = k + 1;
    }
  }

  // Where the followed voice has been: a histogram of live voiced frames over the pitch bins, each
  // weighted by its power relative to the recent peak (quieter frames count far less), decaying with a
  // time constant of kSpeakerMemoryS. speaker_near[b] says whether bin b lies within kFarCents of a bin
  // holding at least kSpeakerKnownShare of the histogram's largest bin: every register the voice has
  // used (speaking and singing alike) stays known. Refreshed once per frame; all near until enough has
  // been heard.
  void speaker_refresh() {
    const auto n = static_cast<int>(speaker_hist.size());
    const double top = *std::max_element(speaker_hist.begin(), speaker_hist.end());
    const int reach = static_cast<int>(kFarCents / kBinCents);
    if (speaker_total < kSpeakerMinWeight * speaker_unit) {
      std::fill(speaker_near.begin(), speaker_near.end(), 1);
      return;
    }
    // Distance (in bins) to the nearest known bin, by two sweeps.
    int last = -1'000'000;
    for (int b = 0; b < n; ++b) {
      if (speaker_hist[static_cast<std::size_t>(b)] >= kSpeakerKnownShare * top) last = b;
      speaker_dist[static_cast<std::size_t>(b)] = b - last;
    }
    last = 1'000'000;
    for (int b = n - 1; b >= 0; --b) {
      if (speaker_hist[static_cast<std::size_t>(b)] >= kSpeakerKnownShare * top) last = b;
      auto& d = speaker_dist[static_cast<std::size_t>(b)];
      d = std::min(d, last - b);
      speaker_near[static_cast<std::size_t>(b)] = d <= reach ? 1 : 0;
    }
  }

  // The histogram decays by speaker_decay per frame. Only ratios between its bins matter, so instead of
  // scaling every bin down each frame, new weights are scaled up (speaker_unit) and everything is
  // brought back to scale once the unit grows large.
  void speaker_update(double bin, double level_db) {
    speaker_unit /= speaker_decay;
    if (speaker_unit > 1e150) {
      for (auto& h : speaker_hist) h /= speaker_unit;
      speaker_total /= speaker_unit;
      speaker_unit = 1.0;
    }
    if (bin < 0) return;
    const double w = std::min(1.0, std::exp2((level_db - peak_db) / 1.50515));  // power re the peak, squared
    const auto b = static_cast<std::size_t>(std::clamp(std::lround(bin), 0L, static_cast<long>(n_bins - 1)));
    speaker_hist[b] += w * speaker_unit;
    speaker_total += w * speaker_unit;
  }

  // The candidate nearest a path's bin (within 3 bins, 75 cents), or n_cand when there is none.
  [[nodiscard]] static std::size_t nearest_candidate(const FrameRecord& rec, std::size_t bin) {
    double best = 3.0;
    std::size_t pick = rec.n_cand;
    for (std::size_t i = 0; i < rec.n_cand; ++i) {
      const double d = std::abs(rec.cand[i].bin - static_cast<double>(bin));
      if (d <= best) {
        best = d;
        pick = i;
      }
    }
    return pick;
  }

  // One step of max-product decoding (Viterbi) with back pointers. Scores are balanced so that a steady
  // voiced path and a steady unvoiced path compare frame by frame as pv against 1 - pv: staying on a bin
  // costs nothing, moving costs the kernel's fall-off, switching voicing costs log(kVoicingSwitch).
  // The max over predecessors runs tap by tap over all bins, which the compiler vectorises.
  __attribute__((target_clones("avx2", "default"))) void hmm_step(std::int64_t k) {
    const auto U = static_cast<std::size_t>(n_bins);
    std::int16_t* bp = backptr.data() + static_cast<std::size_t>(k % ring_len) * (U + 1);
    if (!hmm_started) {
      for (std::size_t s = 0; s <= U; ++s) {
        delta[s] = obs[s];
        bp[s] = static_cast<std::int16_t>(s);
      }
      hmm_started = true;
    } else {
      const float dv_max = delta[best_voiced_bin];
      const auto dv_arg = static_cast<std::int16_t>(best_voiced_bin);
      const float du_prev = delta[U];
      const auto stay = static_cast<float>(1 - kVoicingSwitch);
      const auto from_unvoiced = static_cast<float>(du_prev * kVoicingSwitch);
      // best[b] = max over taps of kernel[d] * delta[b + d]; start with d = 0. The argmax is kept as a
      // float (exact for bin numbers) so that value and index have the same width and vectorise together.
      float* __restrict best = delta_new.data();
      float* __restrict arg = arg_scratch.data();
      for (std::size_t b = 0; b < U; ++b) {
        best[b] = delta[b];
        arg[b] = bin_index[b];
      }
      for (int d = -jump; d <= jump; ++d) {
        if (d == 0) continue;
        const float kd = kernel[static_cast<std::size_t>(d + jump)];
        const auto fd = static_cast<float>(d);
        const auto lo = static_cast<std::size_t>(std::max(0, -d));
        const auto hi = static_cast<std::size_t>(std::min(n_bins, n_bins - d));
        const float* __restrict src = delta.data() + d;
        for (std::size_t b = lo; b < hi; ++b) {
          // Branch-free select (mask times difference, exact for small integers) so that it vectorises.
          const float v = kd * src[b];
          const float better = static_cast<float>(v > best[b]);
          arg[b] += better * (bin_index[b] + fd - arg[b]);
          best[b] = std::max(v, best[b]);
        }
      }
      const auto unvoiced_state = static_cast<float>(U);
      for (std::size_t b = 0; b < U; ++b) {
        const float from_voiced = stay * best[b];
        const float voiced = static_cast<float>(from_voiced >= from_unvoiced);
        best[b] = obs[b] * std::max(from_voiced, from_unvoiced);
        arg[b] += (1.0f - voiced) * (unvoiced_state - arg[b]);
      }
      for (std::size_t b = 0; b < U; ++b) bp[b] = static_cast<std::int16_t>(arg[b]);
      const float uv_from_v = dv_max * static_cast<float>(kVoicingSwitch), uv_from_u = du_prev * stay;
      delta_new[U] = obs[U] * std::max(uv_from_v, uv_from_u);
      bp[U] = uv_from_v > uv_from_u ? dv_arg : static_cast<std::int16_t>(U);
      delta.swap(delta_new);
    }
    // One pass for the best voiced state, then scale so that the best state scores 1.
    best_voiced_bin = 0;
    for (std::size_t b = 1; b < U; ++b)
      if (delta[b] > delta[best_voiced_bin]) best_voiced_bin = b;
    const float dmax = std::max(delta[best_voiced_bin], delta[U]);
    const float inv = dmax > 0 ? 1.0f / dmax : 1.0f;
    for (auto& d : delta) d = dmax > 0 ? d * inv : 1.0f;
  }

  // Trace back from the best state at frame `now` and emit settled frames next_settled..upto.
  void settle_from(std::int64_t now, std::int64_t upto, FrameSink& sink) {
    const auto U = static_cast<std::size_t>(n_bins);
    std::size_t state = delta[best_voiced_bin] > delta[U] ? best_voiced_bin : U;
    // The best path from `now` back to the oldest pending frame; path[i] is the state at first + i.
    std::vector<std::size_t>& path = path_scratch;
    const std::int64_t first = next_settled;
    const auto count = static_cast<std::size_t>(now - first + 1);
    path[count - 1] = state;
    for (std::size_t i = count - 1; i > 0; --i) {
      state = static_cast<std::size_t>(
          backptr[static_cast<std::size_t>((first + static_cast<std::int64_t>(i)) % ring_len) * (U + 1) + state]);
      path[i - 1] = state;
    }
    for (std::int64_t k = first; k <= upto; ++k) emit_settled(k, first, now, sink);
    next_settled = upto + 1;
  }

  // F0 of frame j on the path (0 when unvoiced): the candidate nearest the path's bin gives the sub-bin
  // frequency; the bin centre if none is near.
  [[nodiscard]] double path_f0(std::int64_t j, std::size_t state) const {
    if (state == static_cast<std::size_t>(n_bins)) return 0.0;
    const FrameRecord& rec = records[static_cast<std::size_t>(j % ring_len)];
    const std::size_t c = nearest_candidate(rec, state);
    return c < rec.n_cand ? rec.cand[c].f0_hz : f_of_bin(static_cast<double>(state));
  }

  // Emits frame k, whose path states from `first` to `now` are in path_scratch. The settled F0 is the
  // path's F0 averaged in log frequency with symmetric pairs of neighbours (k - d, k + d for d up to
  // kSettleSmoothReach, triangular weights) that are voiced and within a semitone of it: cycle-to-cycle
  // jitter averages out, and a linear glide keeps its value at the frame's centre. Pairs that are not
  // both available (near a gap, at the end, or beyond the settle lag) are left out.
  void emit_settled(std::int64_t k, std::int64_t first, std::int64_t now, FrameSink& sink) {
    auto raw = [&](std::int64_t j) -> double {
      if (j > now) return 0.0;
      if (j < first) {
        const std::int64_t back = k - j;  // 1 = the frame settled just before k
        return back >= 1 && back <= kSettleSmoothReach && j >= 0 ? raw_history[static_cast<std::size_t>(back - 1) % raw_history.size()] : 0.0;
      }
      return path_f0(j, path_scratch[static_cast<std::size_t>(j - first)]);
    };
    const FrameRecord& rec = records[static_cast<std::size_t>(k % ring_len)];
    SettledFrame out;
    out.index = k;
    out.time_s = rec.time_s;
    out.live_f0_hz = rec.live_f0;
    out.voicing = rec.voicing;
    out.confidence = rec.confidence;
    out.level_dbfs = rec.level_dbfs;
    const double f = raw(k);
    if (f > 0) {
      const double lf = std::log2(f);
      double sum = (kSettleSmoothReach + 1) * lf, weight = kSettleSmoothReach + 1;
      for (int d = 1; d <= kSettleSmoothReach; ++d) {
        const double a = raw(k - d), b = raw(k + d);
        if (a <= 0 || b <= 0) continue;
        const double la = std::log2(a), lb = std::log2(b);
        if (std::abs(la - lf) * 12 > 1.0 || std::abs(lb - lf) * 12 > 1.0) continue;
        const double w = kSettleSmoothReach + 1 - d;
        sum += w * (la + lb);
        weight += 2 * w;
      }
      out.f0_hz = static_cast<float>(std::exp2(sum / weight));
    }
    for (std::size_t i = raw_history.size() - 1; i > 0; --i) raw_history[i] = raw_history[i - 1];
    raw_history[0] = f;
    sink.on_settled(out);
  }

  void process(std::span<const float> block, FrameSink& sink) {
    std::array<float, 1024> clean{};
    std::size_t pos = 0;
    while (pos < block.size()) {
      const std::size_t n = std::min(clean.size(), block.size() - pos);
      for (std::size_t i = 0; i < n; ++i) {
        float v = block[pos + i];
        if (!std::isfinite(v)) {
          v = 0.0f;
          ++nonfinite;
        }
        clean[i] = v;
        level_push(static_cast<double>(v) * v);
      }
      feed_resampler(clean.data(), n, sink);
      pos += n;
    }
  }

  void feed_resampler(const float* x, std::size_t n, FrameSink& sink) {
    if (!resampler) {
      push_analysis(x, n, sink);
      return;
    }
    // With x == nullptr this flushes the resampler.
    const bool flushing = x == nullptr;
    for (;;) {
      SRC_DATA d{};
      d.data_in = x;
      d.input_frames = static_cast<long>(n);
      d.data_out = rs_out.data();
      d.output_frames = static_cast<long>(rs_out.size());
      d.src_ratio = fa / fs;
      d.end_of_input = flushing ? 1 : 0;
      if (const int err = src_process(resampler, &d); err != 0)
        throw std::runtime_error(std::string("resampler: ") + src_strerror(err));
      push_analysis(rs_out.data(), static_cast<std::size_t>(d.output_frames_gen), sink);
      if (!flushing) {
        x += d.input_frames_used;
        n -= static_cast<std::size_t>(d.input_frames_used);
        if (n == 0 && d.output_frames_gen < d.output_frames) break;
      } else if (d.output_frames_gen == 0) {
        break;
      }
    }
  }

  void flush(FrameSink& sink) {
    const std::int64_t total = input_count;
    // The last frame is the last hop whose centre lies within the input (time <= duration). Samples over
    // samples per hop: a 35.2 s input at 16 kHz with 5 ms hops has frames 0..7040, whereas 35.2 / 0.005
    // in floating point is just under 7040.
    const double hop_samples = cfg.hop_ms * 1e-3 * fs;
    const auto last = static_cast<std::int64_t>(std::floor(static_cast<double>(total) / hop_samples + 1e-9));
    // Close the level bins of the last frame with silence.
    while (lvl_bin <= 2 * last + 1) level_push(0.0);
    live_limit = last;
    input_count = total;
    if (resampler) feed_resampler(nullptr, 0, sink);
    while (next_frame <= last) {
      const std::int64_t need = frame_start(next_frame) + span - (buf_start + static_cast<std::int64_t>(buf_len));
      push_analysis_zeros(static_cast<std::size_t>(std::max<std::int64_t>(need, 1)), sink);
    }
    if (next_settled < next_frame) settle_from(next_frame - 1, next_frame - 1, sink);
  }
};

PitchTracker::PitchTracker(const TrackerConfig& config) : impl_(std::make_unique<Impl>(config)) {}
PitchTracker::~PitchTracker() = default;
void PitchTracker::process(std::span<const float> block, FrameSink& sink) { impl_->process(block, sink); }
void PitchTracker::flush(FrameSink& sink) { impl_->flush(sink); }
void PitchTracker::reset() { impl_->reset(); }
const TrackerConfig& PitchTracker::config() const { return impl_->cfg; }
double PitchTracker::analysis_rate_hz() const { return impl_->fa; }
double PitchTracker::live_latency_s() const {
  return (impl_->span - impl_->half) / impl_->fa + (impl_->resampler ? kResamplerHoldBackS : 0.0);
}
int PitchTracker::settle_frames() const { return impl_->settle; }
std::int64_t PitchTracker::nonfinite_samples() const { return impl_->nonfinite; }

}  // namespace pitchwire::dsp
