// recorder.cpp: the session record (see recorder.h and docs/sessions.md).
#include "pitchwire/daemon/recorder.h"

#include <fcntl.h>
#include <pthread.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstring>
#include <ctime>
#include <fstream>
#include <nlohmann/json.hpp>

#include "pitchwire/protocol/encode.h"

namespace pitchwire::daemon {
namespace fs = std::filesystem;
namespace {

constexpr const char* kFormat = "pitchwire.session.v1";
constexpr auto kRetryInterval = std::chrono::seconds(3);  // a failing disk is tried again this often
constexpr auto kWakeInterval = std::chrono::milliseconds(100);
constexpr const char* kAudioFile = "audio.wav";
// audio.wav: 24-bit PCM WAV (what every audio program reads). WAV counts its bytes in 32 bits: recording
// stops, said as a problem, before the data reaches 4 GiB (7.7 hours at 48 kHz, 23 hours at 16 kHz).
constexpr int kAudioFormat = SF_FORMAT_WAV | SF_FORMAT_PCM_24;
constexpr std::int64_t kAudioBytesPerFrame = 3;
constexpr std::int64_t kAudioMaxFrames = (0xFFFFFFFFLL - (1 << 16)) / kAudioBytesPerFrame;
constexpr std::size_t kZeroBlock = 1 << 16;  // frames of silence per write when silence is owed

// Summary percentiles come from a histogram of 10-cent bins from 20 Hz up (bounded memory for sessions of
// any length; each percentile is exact to 10 cents).
constexpr double kHistLowHz = 20.0;
constexpr double kHistBinCents = 10.0;
constexpr std::size_t kHistBins = 1000;  // 20 Hz .. 20 * 2^(10000/1200) = 6.4 kHz

std::string wall_clock(bool compact = false) { return utc_wall_clock(std::chrono::system_clock::now(), compact); }

// Fixed decimals per quantity, as the frames on the wire: times to 0.1 ms (whatever the session's length),
// F0 to 0.001 Hz, voicing and confidence to 0.0001, levels to 0.01 dB; absent as null (JSON) or empty (CSV).
std::string fixed(std::optional<double> v, int decimals) {
  if (!v || !std::isfinite(*v)) return "null";
  std::array<char, 48> buf{};
  const int n = std::snprintf(buf.data(), buf.size(), "%.*f", decimals, *v);
  return std::string(buf.data(), static_cast<std::size_t>(std::max(0, n)));
}
std::string csv_fixed(std::optional<double> v, int decimals) { return v && std::isfinite(*v) ? fixed(v, decimals) : ""; }

std::optional<double> opt(std::optional<float> f) {
  return f ? std::optional<double>(static_cast<double>(*f)) : std::nullopt;
}

// Creates `path` with the given mode (umask can only take bits away; chmod after makes it exact).
std::FILE* open_private(const fs::path& path, const char* mode_text) {
  const int fd = ::open(path.c_str(), O_RDWR | O_CREAT | O_APPEND | O_CLOEXEC, 0600);
  if (fd < 0) return nullptr;
  ::fchmod(fd, 0600);
  std::FILE* f = ::fdopen(fd, mode_text);
  if (!f) ::close(fd);
  return f;
}

bool make_private_folder(const fs::path& dir, std::string& why) {
  std::error_code ec;
  fs::create_directories(dir, ec);
  if (ec) {
    why = "cannot create " + dir.string() + ": " + ec.message();
    return false;
  }
  if (::chmod(dir.c_str(), 0700) != 0) {
    why = "cannot make " + dir.string() + " private: " + std::strerror(errno);
    return false;
  }
  return true;
}

// Writes `text` to `path` (0600) through a temporary file and a rename, so a summary is whole or absent.
bool write_whole(const fs::path& path, const std::string& text) {
  const fs::path tmp = path.string() + ".tmp";
  std::FILE* f = open_private(tmp, "w");
  if (!f) return false;
  ::ftruncate(::fileno(f), 0);
  const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size() && std::fflush(f) == 0 &&
                  ::fdatasync(::fileno(f)) == 0;
  std::fclose(f);
  if (!ok) {
    std::error_code ec;
    fs::remove(tmp, ec);
    return false;
  }
  return ::rename(tmp.c_str(), path.c_str()) == 0;
}

}  // namespace

std::string utc_wall_clock(std::chrono::system_clock::time_point when, bool compact) {
  const std::time_t t = std::chrono::system_clock::to_time_t(when);
  std::tm tm{};
  gmtime_r(&t, &tm);
  std::array<char, 40> buf{};
  if (compact) {
    std::strftime(buf.data(), buf.size(), "%Y%m%dT%H%M%SZ", &tm);
    return buf.data();
  }
  std::strftime(buf.data(), buf.size(), "%Y-%m-%dT%H:%M:%S", &tm);
  const auto ms = std::chrono::duration_cast<std::chrono::milliseconds>(when.time_since_epoch()).count() % 1000;
  std::array<char, 48> out{};
  std::snprintf(out.data(), out.size(), "%s.%03dZ", buf.data(), static_cast<int>(ms));
  return out.data();
}

// ---- SessionSummary ----------------------------------------------------------------------------------

void SessionSummary::add_frame(double time_s, std::optional<double> f0_hz, double hop_s) {
  ++frames_;
  last_time_s_ = std::max(last_time_s_, time_s);
  if (!f0_hz || !(*f0_hz > 0.0)) return;
  ++voiced_frames_;
  voiced_s_ += hop_s;
  if (f0s_.empty()) f0s_.assign(kHistBins, 0.0);
  const double cents = 1200.0 * std::log2(*f0_hz / kHistLowHz);
  const auto bin = static_cast<std::size_t>(std::clamp(cents / kHistBinCents, 0.0, static_cast<double>(kHistBins - 1)));
  f0s_[bin] += 1.0;
}

void SessionSummary::add_event(std::string_view kind) {
  if (kind == "marker") ++markers_;
  if (kind == "exercise_ended") ++exercises_;
  if (kind == "recording_problem") ++problems_;
}

std::string SessionSummary::to_json(std::string_view closed_how, std::string_view ended_wall,
                                    std::string_view started_wall) const {
  // Percentile p of the voiced frames: the centre of the bin holding the frame of rank ceil(p * n).
  auto percentile = [&](double p) -> std::optional<double> {
    if (voiced_frames_ == 0 || f0s_.empty()) return std::nullopt;
    const double rank = std::max(1.0, std::ceil(p * static_cast<double>(voiced_frames_)));
    double seen = 0;
    for (std::size_t b = 0; b < f0s_.size(); ++b) {
      seen += f0s_[b];
      if (seen >= rank) return kHistLowHz * std::exp2((static_cast<double>(b) + 0.5) * kHistBinCents / 1200.0);
    }
    return std::nullopt;
  };
  nlohmann::json j;
  j["format"] = kFormat;
  j["closed"] = closed_how;
  j["started_wall"] = started_wall;
  j["ended_wall"] = ended_wall;
  j["duration_s"] = std::round(last_time_s_ * 1000.0) / 1000.0;
  j["frames"] = frames_;
  j["voiced_s"] = std::round(voiced_s_ * 1000.0) / 1000.0;
  const auto p5 = percentile(0.05), p50 = percentile(0.5), p95 = percentile(0.95);
  auto put = [&](const char* key, std::optional<double> v) {
    j[key] = v ? nlohmann::json(std::round(*v * 10.0) / 10.0) : nlohmann::json(nullptr);
  };
  put("f0_p5_hz", p5);
  put("f0_p50_hz", p50);
  put("f0_p95_hz", p95);
  j["f0_range_st"] = p5 && p95 ? nlohmann::json(std::round(1200.0 * std::log2(*p95 / *p5)) / 100.0) : nlohmann::json(nullptr);
  j["markers"] = markers_;
  j["exercises"] = exercises_;
  j["recording_problems"] = problems_;
  return j.dump(2) + "\n";
}

// ---- Recorder ----------------------------------------------------------------------------------------

Recorder::Recorder(RecorderOptions options, std::function<void(const std::string&, bool)> on_problem)
    : options_(std::move(options)), on_problem_(std::move(on_problem)) {}

Recorder::~Recorder() { stop(); }

void Recorder::start() {
  started_wall_ = wall_clock();
  const std::string base = wall_clock(true);
  std::error_code ec;
  folder_ = options_.sessions_dir / base;
  for (int n = 2; fs::exists(folder_, ec); ++n) folder_ = options_.sessions_dir / (base + "-" + std::to_string(n));
  nlohmann::json head{{"type", "session"},        {"format", kFormat},         {"started_wall", started_wall_},
                      {"source", options_.source}, {"hop_ms", options_.hop_ms}, {"pid", static_cast<int>(::getpid())}};
  if (options_.record_audio) {
    head["audio_file"] = kAudioFile;
    head["sample_rate_hz"] = options_.sample_rate_hz;
    audio_queue_max_ = static_cast<std::size_t>(options_.audio_queue_s * options_.sample_rate_hz);
    audio_queue_.reserve(audio_queue_max_);
  }
  push(head.dump(), false);
  {
    const std::lock_guard lock(mutex_);
    csv_queue_.push_back("time_s,f0_hz,live_f0_hz,voicing,confidence,level_dbfs");
  }
  thread_ = std::thread([this] { run(); });
}

void Recorder::stop() noexcept {
  {
    const std::lock_guard lock(mutex_);
    if (!thread_.joinable()) return;
    stop_requested_ = true;
  }
  wake_.notify_all();
  thread_.join();
}

void Recorder::push(std::string line, bool droppable) {
  const std::lock_guard lock(mutex_);
  if (droppable && queue_.size() >= options_.queue_lines) {
    dropped_.fetch_add(1);
    return;
  }
  queue_.push_back(std::move(line));
}

void Recorder::record_settled(const dsp::SettledFrame& frame) {
  const std::string t = fixed(frame.time_s, 4), voicing = fixed(frame.voicing, 4), confidence = fixed(frame.confidence, 4),
                    level = fixed(frame.level_dbfs, 2);
  std::string line = "{\"type\":\"settled\",\"index\":" + std::to_string(frame.index) + ",\"time_s\":" + t +
                     ",\"f0_hz\":" + fixed(opt(frame.f0_hz), 3) + ",\"live_f0_hz\":" + fixed(opt(frame.live_f0_hz), 3) +
                     ",\"voicing\":" + voicing + ",\"confidence\":" + confidence + ",\"level_dbfs\":" + level + "}";
  std::string row = t + "," + csv_fixed(opt(frame.f0_hz), 3) + "," + csv_fixed(opt(frame.live_f0_hz), 3) + "," + voicing +
                    "," + confidence + "," + level;
  const std::lock_guard lock(mutex_);
  summary_.add_frame(frame.time_s, opt(frame.f0_hz), options_.hop_ms / 1000.0);
  if (queue_.size() >= options_.queue_lines) {
    dropped_.fetch_add(1);
    return;
  }
  queue_.push_back(std::move(line));
  csv_queue_.push_back(std::move(row));
}

void Recorder::record_stats(const protocol::Stats& stats) {
  push("{\"type\":\"stats\",\"wall\":\"" + wall_clock() + "\"" + protocol::encode(stats).body, true);
}

void Recorder::record_event(const protocol::Event& event) {
  {
    const std::lock_guard lock(mutex_);
    summary_.add_event(protocol::name(event.kind));
    summary_.set_last_time(event.time_s);
    if (event.kind == protocol::EventKind::kExerciseEnded) {
      // The exercise's own file: exercise-01-sustained_vowel.json, its summary and when it ended.
      ++exercises_ended_;
      std::array<char, 16> n{};
      std::snprintf(n.data(), n.size(), "%02d", exercises_ended_);
      const std::string preset = event.payload.value("preset", std::string("exercise"));
      nlohmann::json file = event.payload;
      file["ended_s"] = event.time_s;
      file["ended_wall"] = wall_clock();
      if (event.by) file["by"] = protocol::name(*event.by);
      files_.emplace_back(std::string("exercise-") + n.data() + "-" + preset + ".json", file.dump(2) + "\n");
    }
  }
  // Events are the record of what the supervisor did: never dropped for a full queue.
  push("{\"type\":\"event\",\"wall\":\"" + wall_clock() + "\"" + protocol::encode(event).body, false);
}

void Recorder::record_audio(std::span<const float> samples) {
  if (!options_.record_audio || samples.empty()) return;
  const std::lock_guard lock(mutex_);
  if (audio_dropping_ || audio_queue_.size() + samples.size() > audio_queue_max_) {
    audio_dropping_ = true;
    audio_silence_ += static_cast<std::int64_t>(samples.size());
    audio_lost_.fetch_add(static_cast<std::int64_t>(samples.size()));
    return;
  }
  audio_queue_.insert(audio_queue_.end(), samples.begin(), samples.end());
}

bool Recorder::open_audio(std::string& failed) {
  const fs::path path = folder_ / kAudioFile;
  const int fd = ::open(path.c_str(), O_RDWR | O_CREAT | O_CLOEXEC, 0600);
  struct stat st {};
  if (fd < 0 || ::fchmod(fd, 0600) != 0 || ::fstat(fd, &st) != 0) {
    failed = std::string(kAudioFile) + ": " + std::strerror(errno);
    if (fd >= 0) ::close(fd);
    return false;
  }
  SF_INFO info{};
  if (st.st_size == 0) {
    info.samplerate = static_cast<int>(std::lround(options_.sample_rate_hz));
    info.channels = 1;
    info.format = kAudioFormat;
    audio_ = sf_open_fd(fd, SFM_WRITE, &info, SF_FALSE);
    audio_frames_ = 0;
  } else {  // writing again after a failure: append
    audio_ = sf_open_fd(fd, SFM_RDWR, &info, SF_FALSE);
    const sf_count_t end = audio_ ? sf_seek(audio_, 0, SEEK_END) : -1;
    if (audio_ && end < 0) {
      sf_close(audio_);
      audio_ = nullptr;
    }
    audio_frames_ = end < 0 ? 0 : end;
  }
  if (!audio_) {
    failed = std::string(kAudioFile) + ": " + sf_strerror(nullptr);
    ::close(fd);
    return false;
  }
  audio_fd_ = fd;
  // The header is brought up to date on every write, so that a killed daemon leaves a readable file.
  sf_command(audio_, SFC_SET_UPDATE_HEADER_AUTO, nullptr, SF_TRUE);
  sf_command(audio_, SFC_SET_CLIPPING, nullptr, SF_TRUE);
  return true;
}

bool Recorder::write_audio(const std::vector<float>& samples, std::int64_t owed_after, std::string& failed) {
  const auto n = static_cast<std::int64_t>(samples.size());
  // What is not written stays owed as silence, so that audio.wav stays on the audio clock.
  auto owe_from = [&](std::int64_t written) {
    audio_lost_.fetch_add(n - written);
    audio_owed_ += (n - written) + owed_after;
  };
  if (!audio_ && !open_audio(failed)) {
    owe_from(0);
    return false;
  }
  if (audio_frames_ + audio_owed_ + n > kAudioMaxFrames) {  // WAV's 4 GiB: stop here, whole
    audio_full_ = true;
    audio_lost_.fetch_add(n);
    return true;
  }
  // Silence owed for samples lost earlier comes first: it stood before these in the input.
  static const std::vector<float> zeros(kZeroBlock, 0.0f);
  while (audio_owed_ > 0) {
    const auto k = static_cast<sf_count_t>(std::min<std::int64_t>(audio_owed_, kZeroBlock));
    const sf_count_t w = sf_writef_float(audio_, zeros.data(), k);
    audio_owed_ -= std::max<sf_count_t>(w, 0);
    audio_frames_ += std::max<sf_count_t>(w, 0);
    if (w != k) {
      failed = std::string(kAudioFile) + ": " + sf_strerror(audio_);
      owe_from(0);
      return false;
    }
  }
  const sf_count_t w = n > 0 ? sf_writef_float(audio_, samples.data(), n) : 0;
  audio_frames_ += std::max<sf_count_t>(w, 0);
  if (w != n) {
    failed = std::string(kAudioFile) + ": " + sf_strerror(audio_);
    owe_from(std::max<sf_count_t>(w, 0));
    return false;
  }
  audio_owed_ += owed_after;
  return true;
}

void Recorder::close_audio() noexcept {
  if (audio_) sf_close(audio_);
  if (audio_fd_ >= 0) ::close(audio_fd_);
  audio_ = nullptr;
  audio_fd_ = -1;
}

// Recorder thread. The audio file fails and recovers on its own: a problem with it never stops the log.
void Recorder::keep_audio(const std::vector<float>& audio, std::int64_t owed_after, bool flush, bool stopping) {
  if (audio_full_) {
    audio_lost_.fetch_add(static_cast<std::int64_t>(audio.size()));
    return;
  }
  const auto now = std::chrono::steady_clock::now();
  if (audio_failing_ && !stopping && now - audio_last_try_ < kRetryInterval) {  // wait for the next try
    audio_lost_.fetch_add(static_cast<std::int64_t>(audio.size()));
    audio_owed_ += static_cast<std::int64_t>(audio.size()) + owed_after;
    return;
  }
  audio_last_try_ = now;
  std::string failed;
  bool ok = write_audio(audio, owed_after, failed);
  if (ok && stopping && !audio_full_) ok = write_audio({}, 0, failed);  // silence owed at the very end
  if (ok && audio_ && (flush || stopping)) {
    sf_write_sync(audio_);
    if (::fdatasync(audio_fd_) != 0) {
      ok = false;
      failed = std::string(kAudioFile) + ": " + std::strerror(errno);
    }
  }
  if (audio_full_) {
    close_audio();
    if (on_problem_) {
      on_problem_("session record: " + (folder_ / kAudioFile).string() +
                      " reached the size limit of WAV (4 GiB); the rest of the session is not kept as audio",
                  false);
    }
    return;
  }
  if (!ok) {
    close_audio();  // opened again (appending) at the next try
    if (!audio_failing_ && on_problem_) on_problem_("session record: cannot write " + (folder_ / failed).string(), false);
    audio_failing_ = true;
    return;
  }
  if (audio_failing_) {
    audio_failing_ = false;
    if (on_problem_) on_problem_("session record: writing " + (folder_ / kAudioFile).string() + " again", true);
  }
}

void Recorder::problem(const std::string& what) {
  if (failing_) return;
  failing_ = true;
  if (on_problem_) on_problem_(what, false);
}

bool Recorder::open_files() {
  std::string why;
  if (!make_private_folder(options_.sessions_dir, why) || !make_private_folder(folder_, why)) {
    problem("session record: " + why);
    return false;
  }
  log_ = open_private(folder_ / "session.jsonl", "a");
  csv_ = log_ ? open_private(folder_ / "frames.csv", "a") : nullptr;
  if (!log_ || !csv_) {
    problem("session record: cannot open files in " + folder_.string() + ": " + std::strerror(errno));
    close_files();
    return false;
  }
  // After a failed write a file may end in a line cut short: start on a line of its own, so that the cut
  // line stays one unreadable line instead of spoiling the next.
  for (std::FILE* f : {log_, csv_}) {
    struct stat st {};
    char last = '\n';
    if (::fstat(::fileno(f), &st) == 0 && st.st_size > 0 && ::pread(::fileno(f), &last, 1, st.st_size - 1) == 1 &&
        last != '\n') {
      std::fputc('\n', f);
    }
  }
  return true;
}

bool Recorder::write_out(std::deque<std::string>& lines) {
  for (std::size_t i = 0; i < lines.size(); ++i) {
    std::string& line = lines[i];
    line.push_back('\n');
    if (std::fwrite(line.data(), 1, line.size(), log_) != line.size()) {
      dropped_.fetch_add(static_cast<std::int64_t>(lines.size() - i));  // this one and the rest of the batch
      return false;
    }
    written_.fetch_add(1);
  }
  return true;
}

bool Recorder::flush_files() {
  return std::fflush(log_) == 0 && std::fflush(csv_) == 0 && ::fdatasync(::fileno(log_)) == 0 &&
         ::fdatasync(::fileno(csv_)) == 0;
}

void Recorder::close_files() noexcept {
  if (log_) std::fclose(log_);
  if (csv_) std::fclose(csv_);
  log_ = csv_ = nullptr;
}

void Recorder::run() {
  pthread_setname_np(pthread_self(), "pw-recorder");
  using Clock = std::chrono::steady_clock;
  auto last_flush = Clock::now();
  auto last_try = Clock::now() - kRetryInterval;
  const auto flush_every = std::chrono::duration<double>(options_.flush_interval_s);
  bool stopping = false;
  // Audio taken from the queue; swapped with it, so that both keep their capacity (the analysis thread
  // never allocates to append).
  std::vector<float> audio;
  audio.reserve(audio_queue_max_);
  while (!stopping) {
    audio.clear();
    std::int64_t audio_owed_after = 0;
    std::deque<std::string> lines, rows;
    std::deque<std::pair<std::string, std::string>> files;
    {
      std::unique_lock lock(mutex_);
      wake_.wait_for(lock, kWakeInterval, [this] { return stop_requested_; });
      stopping = stop_requested_;
      lines.swap(queue_);
      rows.swap(csv_queue_);
      files.swap(files_);
      audio.swap(audio_queue_);
      // Input lost after these samples (the queue was full) is owed as silence after them.
      audio_owed_after = audio_silence_;
      audio_silence_ = 0;
      audio_dropping_ = false;
    }
    if (!log_ && (stopping || Clock::now() - last_try >= kRetryInterval)) {
      last_try = Clock::now();
      open_files();
    }
    const bool flush_due = stopping || Clock::now() - last_flush >= flush_every;
    // The audio file (only with record_audio) goes its own way: its problems never stop the log.
    if (options_.record_audio && !folder_.empty() && fs::is_directory(folder_)) {
      keep_audio(audio, audio_owed_after, flush_due, stopping);
    } else if (options_.record_audio) {
      audio_lost_.fetch_add(static_cast<std::int64_t>(audio.size()));
      audio_owed_ += static_cast<std::int64_t>(audio.size()) + audio_owed_after;
    }
    if (!log_) {  // nothing can be written: these lines are lost, and counted (an exercise's file is
      // kept for the next try: its summary is in the events too)
      dropped_.fetch_add(static_cast<std::int64_t>(lines.size()));
      const std::lock_guard lock(mutex_);
      files_.insert(files_.begin(), files.begin(), files.end());
      continue;
    }
    // Lines lost meanwhile are counted in a gap line; the count is taken as reported only once the line
    // is on disk (the flush below is forced then).
    std::int64_t gap_upto = -1;
    if (const std::int64_t dropped = dropped_.load(); dropped > dropped_reported_) {
      lines.push_front("{\"type\":\"gap\",\"wall\":\"" + wall_clock() + "\",\"lines_lost\":" +
                       std::to_string(dropped - dropped_reported_) + "}");
      gap_upto = dropped;
    }
    std::string failed;  // the file that could not be written, and why
    const std::int64_t data_lines = static_cast<std::int64_t>(lines.size()) - (gap_upto >= 0 ? 1 : 0);
    bool ok = write_out(lines);
    if (!ok) failed = "session.jsonl: " + std::string(std::strerror(errno));
    for (std::string& row : rows) {
      row.push_back('\n');
      if (ok && std::fwrite(row.data(), 1, row.size(), csv_) != row.size()) {
        ok = false;
        failed = "frames.csv: " + std::string(std::strerror(errno));
      }
    }
    if (ok) unflushed_ += data_lines;
    if (ok && (flush_due || gap_upto >= 0)) {
      ok = flush_files();
      if (!ok) failed = "session.jsonl and frames.csv: " + std::string(std::strerror(errno));
      last_flush = Clock::now();
      if (ok) {
        unflushed_ = 0;  // on disk
        if (gap_upto >= 0) dropped_reported_ = gap_upto;
      }
    }
    std::size_t files_written = 0;
    for (const auto& [name, content] : files) {
      if (!ok) break;
      if (!write_whole(folder_ / name, content)) {
        ok = false;
        failed = name + ": " + std::strerror(errno);
        break;
      }
      ++files_written;
    }
    if (!ok) {
      // Lines still in the stdio buffers are lost with the close below: count them. Files not written are
      // kept for the next try.
      dropped_.fetch_add(unflushed_);
      unflushed_ = 0;
      {
        const std::lock_guard lock(mutex_);
        files_.insert(files_.begin(), files.begin() + static_cast<std::ptrdiff_t>(files_written), files.end());
      }
      problem("session record: cannot write " + (folder_ / failed).string());
      close_files();  // reopened (appending) on the next try
      last_try = Clock::now();
      continue;
    }
    if (failing_ && ok) {
      failing_ = false;
      if (on_problem_) on_problem_("session record: writing again to " + folder_.string(), true);
    }
  }
  close_audio();
  if (log_) {
    std::string summary;
    {
      const std::lock_guard lock(mutex_);
      summary = summary_.to_json("stopped", wall_clock(), started_wall_);
    }
    flush_files();
    close_files();
    if (!write_whole(folder_ / "summary.json", summary)) {
      problem("session record: cannot write " + (folder_ / "summary.json").string() + ": " + std::strerror(errno));
    }
  }
}

std::vector<fs::path> Recorder::close_unfinished(const fs::path& sessions_dir) {
  std::vector<fs::path> closed;
  std::error_code ec;
  if (!fs::is_directory(sessions_dir, ec)) return closed;
  for (const auto& entry : fs::directory_iterator(sessions_dir, ec)) {
    const fs::path dir = entry.path();
    if (!entry.is_directory(ec) || !fs::exists(dir / "session.jsonl", ec) || fs::exists(dir / "summary.json", ec)) continue;
    std::ifstream in(dir / "session.jsonl");
    SessionSummary summary;
    std::string line, started, last_wall;
    double hop_s = 0.005;
    while (std::getline(in, line)) {
      const nlohmann::json j = nlohmann::json::parse(line, nullptr, false);
      if (j.is_discarded() || !j.is_object()) continue;  // a torn last line
      auto text = [&](const char* key) -> std::string {
        const auto it = j.find(key);
        return it != j.end() && it->is_string() ? it->get<std::string>() : std::string();
      };
      auto number = [&](const char* key) -> std::optional<double> {
        const auto it = j.find(key);
        return it != j.end() && it->is_number() ? std::optional<double>(it->get<double>()) : std::nullopt;
      };
      const std::string type = text("type");
      if (const std::string wall = text("wall"); !wall.empty()) last_wall = wall;
      if (type == "session") {
        started = text("started_wall");
        hop_s = number("hop_ms").value_or(5.0) / 1000.0;
      } else if (type == "settled") {
        if (const auto t = number("time_s")) summary.add_frame(*t, number("f0_hz"), hop_s);
      } else if (type == "event") {
        summary.add_event(text("kind"));
        if (const auto t = number("time_s")) summary.set_last_time(*t);
      }
    }
    if (last_wall.empty()) {
      // The log's last change stands in for the end.
      const auto t = fs::last_write_time(dir / "session.jsonl", ec);
      last_wall = utc_wall_clock(std::chrono::time_point_cast<std::chrono::system_clock::duration>(
          t - fs::file_time_type::clock::now() + std::chrono::system_clock::now()));
    }
    if (write_whole(dir / "summary.json", summary.to_json("recovered", last_wall, started))) closed.push_back(dir);
  }
  std::sort(closed.begin(), closed.end());
  return closed;
}

}  // namespace pitchwire::daemon
