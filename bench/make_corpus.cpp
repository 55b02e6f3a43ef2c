// make_corpus.cpp: `pitchwire-corpus OUTDIR [--quick] [--seed N]` writes the synthetic voice corpus with
// exact frame truth, for the accuracy and speed comparisons in bench/.
//
// For every item:
//   OUTDIR/<name>.wav      mono 16-bit PCM WAV
//   OUTDIR/<name>.f0.csv   time_s,f0_hz every 1 ms from 0; f0_hz empty when the target voice is unvoiced
// and one OUTDIR/manifest.csv: name,kind,voice,sample_rate_hz,condition,snr_db,level,duration_s.
//
// Each base item (a kind, a voice, a number) is rendered once, clean, at one of 16000, 44100 and 48000 Hz,
// then written clean and with interferers added at a set SNR (mean power of the target over the whole
// file / mean power of the interferer): white noise, pink noise (Kellet's filter), mains hum (50 or
// 60 Hz with harmonics) or a quieter competing voice (another synthesized speaker, other F0 and text).
// Conditions rotate over the items so that every condition, SNR and rate is covered. About one variant
// in seven is written quiet (peaks near -30 dBFS). The truth is always the target voice's alone.
//
// Deterministic for a seed: texts, notes, contours, noises and the choice of conditions follow from it.
// Single-threaded; the full corpus takes well under a minute.
#include <sndfile.h>

#include <charconv>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <stdexcept>
#include <string>
#include <string_view>
#include <vector>

#include "pitchwire/dsp/voice_synth.h"

namespace {

using namespace pitchwire::dsp;

struct Plan {
  ItemKind kind;
  VoiceType voice;
  int full_count;
  int quick_count;
};

// Items per kind and voice. Full: about 270 files, 19 minutes. Quick: 30 files, about 2 minutes.
constexpr Plan kPlan[] = {
    {ItemKind::speech, VoiceType::low_male, 8, 1},  {ItemKind::speech, VoiceType::male, 8, 1},
    {ItemKind::speech, VoiceType::female, 8, 1},    {ItemKind::speech, VoiceType::child, 8, 1},
    {ItemKind::sustained, VoiceType::low_male, 2, 0}, {ItemKind::sustained, VoiceType::male, 2, 1},
    {ItemKind::sustained, VoiceType::female, 2, 0}, {ItemKind::sustained, VoiceType::child, 2, 0},
    {ItemKind::breathy, VoiceType::male, 2, 0},     {ItemKind::breathy, VoiceType::female, 2, 1},
    {ItemKind::glide, VoiceType::male, 3, 0},       {ItemKind::glide, VoiceType::female, 3, 1},
    {ItemKind::glide, VoiceType::child, 3, 0},      {ItemKind::sung, VoiceType::female, 5, 1},
    {ItemKind::sung, VoiceType::soprano, 5, 1},     {ItemKind::fry, VoiceType::low_male, 2, 1},
    {ItemKind::fry, VoiceType::male, 2, 0},
};

enum class Condition { clean, white, pink, hum, voice };

std::string_view condition_name(Condition c) {
  switch (c) {
    case Condition::clean: return "clean";
    case Condition::white: return "white";
    case Condition::pink: return "pink";
    case Condition::hum: return "hum";
    case Condition::voice: return "voice";
  }
  return "clean";
}

constexpr double kRates[] = {16000.0, 44100.0, 48000.0};
constexpr double kSnrs[] = {20.0, 10.0, 5.0};
constexpr Condition kNoisy[] = {Condition::white, Condition::pink, Condition::hum, Condition::voice};

std::string rate_tag(double fs) {
  if (fs == 44100.0) return "44k1";
  return std::to_string(static_cast<int>(fs / 1000.0)) + "k";
}

// The competing speaker: another voice type, so F0 differs clearly from the target's.
VoiceType competing_voice(VoiceType target) {
  switch (target) {
    case VoiceType::low_male: return VoiceType::female;
    case VoiceType::male: return VoiceType::female;
    case VoiceType::female: return VoiceType::male;
    case VoiceType::child: return VoiceType::low_male;
    case VoiceType::soprano: return VoiceType::male;
  }
  return VoiceType::female;
}

void append_script(Script& a, const Script& b) {
  const double offset = a.duration_s();
  a.segments.insert(a.segments.end(), b.segments.begin(), b.segments.end());
  for (const F0Point& p : b.f0_contour) a.f0_contour.push_back({p.time_s + offset, p.f0_hz});
}

std::vector<float> competing_speech(VoiceType target, std::size_t n, double fs, std::uint64_t seed) {
  const VoiceType voice = competing_voice(target);
  Script s = make_item_script(ItemKind::speech, voice, mix_seed(seed, 0));
  for (std::uint64_t k = 1; s.duration_s() * fs < static_cast<double>(n) && k < 20; ++k) {
    append_script(s, make_item_script(ItemKind::speech, voice, mix_seed(seed, k)));
  }
  RenderOptions opt;
  opt.seed = mix_seed(seed, 99);
  std::vector<float> x = render(s, fs, opt).samples;
  x.resize(n, 0.0f);
  return x;
}

void write_wav(const std::filesystem::path& path, const std::vector<float>& x, double fs) {
  SF_INFO info{};
  info.samplerate = static_cast<int>(fs);
  info.channels = 1;
  info.format = SF_FORMAT_WAV | SF_FORMAT_PCM_16;
  SNDFILE* f = sf_open(path.string().c_str(), SFM_WRITE, &info);
  if (!f) throw std::runtime_error("cannot write " + path.string() + ": " + sf_strerror(nullptr));
  sf_command(f, SFC_SET_CLIPPING, nullptr, SF_TRUE);
  const auto n = static_cast<sf_count_t>(x.size());
  const sf_count_t written = sf_writef_float(f, x.data(), n);
  sf_close(f);
  if (written != n) throw std::runtime_error("short write to " + path.string());
}

void write_truth(const std::filesystem::path& path, const Rendered& r) {
  std::ofstream out(path);
  if (!out) throw std::runtime_error("cannot write " + path.string());
  out << "time_s,f0_hz\n";
  char line[64];
  for (const TruthSample& t : r.truth) {
    if (t.f0_hz > 0.0f) {
      std::snprintf(line, sizeof line, "%.3f,%.3f\n", t.time_s, static_cast<double>(t.f0_hz));
    } else {
      std::snprintf(line, sizeof line, "%.3f,\n", t.time_s);
    }
    out << line;
  }
  if (!out) throw std::runtime_error("write failed: " + path.string());
}

int usage(std::FILE* to, int code) {
  std::fprintf(to,
               "usage: pitchwire-corpus OUTDIR [--quick] [--seed N]\n"
               "  Writes the synthetic voice corpus: <name>.wav, <name>.f0.csv and manifest.csv.\n"
               "  --quick   a representative subset (about 2 minutes of audio) for CI\n"
               "  --seed N  corpus seed (default 1); other seeds give other texts and contours\n");
  return code;
}

}  // namespace

int main(int argc, char** argv) {
  std::string outdir;
  bool quick = false;
  std::uint64_t seed = 1;
  for (int i = 1; i < argc; ++i) {
    const std::string_view a = argv[i];
    if (a == "--quick") {
      quick = true;
    } else if (a == "--seed" && i + 1 < argc) {
      const std::string_view v = argv[++i];
      const auto [ptr, ec] = std::from_chars(v.data(), v.data() + v.size(), seed);
      if (ec != std::errc{} || ptr != v.data() + v.size()) {
        std::fprintf(stderr, "pitchwire-corpus: --seed needs a non-negative integer, got '%s'\n", argv[i]);
        return 2;
      }
    } else if (a == "-h" || a == "--help") {
      return usage(stdout, 0);
    } else if (!a.empty() && a[0] != '-' && outdir.empty()) {
      outdir = a;
    } else {
      std::fprintf(stderr, "pitchwire-corpus: unexpected argument '%s'\n", argv[i]);
      return usage(stderr, 2);
    }
  }
  if (outdir.empty()) return usage(stderr, 2);

  try {
    const std::filesystem::path dir(outdir);
    std::filesystem::create_directories(dir);
    std::ofstream manifest(dir / "manifest.csv");
    if (!manifest) throw std::runtime_error("cannot write " + (dir / "manifest.csv").string());
    manifest << "name,kind,voice,sample_rate_hz,condition,snr_db,level,duration_s\n";

    std::size_t noisy_slot = 0, variant_count = 0;
    double total_s = 0.0;
    for (const Plan& plan : kPlan) {
      const int count = quick ? plan.quick_count : plan.full_count;
      for (int idx = 0; idx < count; ++idx) {
        const auto kind_i = static_cast<std::uint64_t>(plan.kind);
        const auto voice_i = static_cast<std::uint64_t>(plan.voice);
        const std::uint64_t item_seed = mix_seed(seed, kind_i * 1000 + voice_i * 100 + static_cast<std::uint64_t>(idx));
        const double fs = kRates[(kind_i + voice_i + static_cast<std::uint64_t>(idx)) % 3];
        const Script script = make_item_script(plan.kind, plan.voice, item_seed);
        RenderOptions opt;
        opt.seed = mix_seed(item_seed, 1);
        opt.peak_dbfs.reset();
        const Rendered target = render(script, fs, opt);
        const std::size_t n = target.samples.size();

        const int noisy = quick ? 2 : 3;
        for (int v = 0; v <= noisy; ++v) {
          Condition cond = Condition::clean;
          double snr = 0.0;
          if (v > 0) {
            cond = kNoisy[noisy_slot % 4];
            snr = kSnrs[(noisy_slot / 4) % 3];
            ++noisy_slot;
          }
          const std::uint64_t var_seed = mix_seed(item_seed, 100 + static_cast<std::uint64_t>(v));
          std::vector<float> x = target.samples;
          switch (cond) {
            case Condition::clean: break;
            case Condition::white: mix_at_snr(x, white_noise(n, var_seed), snr); break;
            case Condition::pink: mix_at_snr(x, pink_noise(n, var_seed), snr); break;
            case Condition::hum:
              mix_at_snr(x, mains_hum(n, fs, variant_count % 2 == 0 ? 50.0 : 60.0, var_seed), snr);
              break;
            case Condition::voice: mix_at_snr(x, competing_speech(plan.voice, n, fs, var_seed), snr); break;
          }
          const bool quiet = variant_count % 7 == 3;
          Rng level_rng(mix_seed(var_seed, 7));
          normalize_peak(x, quiet ? level_rng.uniform(-32.0, -28.0) : level_rng.uniform(-6.0, -1.0));

          const std::string number = (idx < 10 ? "0" : "") + std::to_string(idx);
          std::string name = std::string(item_kind_name(plan.kind)) + "_" + std::string(voice_type_name(plan.voice)) +
                             "_" + rate_tag(fs) + "_" + number + "_" + std::string(condition_name(cond));
          if (cond != Condition::clean) name += std::to_string(static_cast<int>(snr));
          if (quiet) name += "_quiet";

          write_wav(dir / (name + ".wav"), x, fs);
          write_truth(dir / (name + ".f0.csv"), target);
          char row[256];
          std::snprintf(row, sizeof row, "%s,%s,%s,%d,%s,%s,%s,%.3f\n", name.c_str(),
                        std::string(item_kind_name(plan.kind)).c_str(), std::string(voice_type_name(plan.voice)).c_str(),
                        static_cast<int>(fs), std::string(condition_name(cond)).c_str(),
                        cond == Condition::clean ? "" : std::to_string(static_cast<int>(snr)).c_str(),
                        quiet ? "quiet" : "normal", target.duration_s());
          manifest << row;
          total_s += target.duration_s();
          ++variant_count;
        }
      }
    }
    manifest.flush();
    if (!manifest) throw std::runtime_error("write failed: manifest.csv");
    std::printf("pitchwire-corpus: %zu files, %.1f s (%.1f min) of audio in %s\n", variant_count, total_s,
                total_s / 60.0, dir.string().c_str());
  } catch (const std::exception& e) {
    std::fprintf(stderr, "pitchwire-corpus: %s\n", e.what());
    return 1;
  }
  return 0;
}
