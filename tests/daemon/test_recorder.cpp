// Tests of the session record (daemon/recorder.h): folder and file modes, what each file holds, the summary
// against values known by construction, recovery of an unfinished session, and a folder that cannot be made.
#include "pitchwire/daemon/recorder.h"

#include <gtest/gtest.h>
#include <sndfile.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <csignal>
#include <mutex>
#include <thread>
#include <cmath>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>
#include <vector>

namespace pitchwire::daemon {
namespace {

namespace fs = std::filesystem;
using Json = nlohmann::json;

struct TempDir {
  fs::path path;
  TempDir() {
    std::string tmpl = (fs::temp_directory_path() / "pitchwire-recorder-XXXXXX").string();
    path = ::mkdtemp(tmpl.data());
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path, ec);
  }
};

unsigned mode_of(const fs::path& p) {
  struct stat st{};
  ::stat(p.c_str(), &st);
  return st.st_mode & 0777u;
}

std::vector<std::string> lines_of(const fs::path& p) {
  std::ifstream in(p);
  std::vector<std::string> out;
  for (std::string line; std::getline(in, line);) out.push_back(line);
  return out;
}

Json read_json(const fs::path& p) {
  std::ifstream in(p);
  return Json::parse(in);
}

// 1000 frames 5 ms apart: the first 500 unvoiced, the next 500 at 200 Hz (5 s, 2.5 s voiced).
void record_known_session(Recorder& r) {
  for (int i = 0; i < 1000; ++i) {
    dsp::SettledFrame f;
    f.index = i;
    f.time_s = i * 0.005;
    if (i >= 500) f.f0_hz = 200.0f;
    f.voicing = i >= 500 ? 0.98f : 0.01f;
    f.level_dbfs = -20.0f;
    r.record_settled(f);
  }
  protocol::Mark mark;
  mark.label = "stimulus 1";
  r.record_event(protocol::marker_event(4.0, mark));
  protocol::Exercise exercise{"sustained_vowel", "first try", 2.5};
  protocol::Event ended = protocol::exercise_ended_event(5.0, exercise, protocol::Json{{"voiced_s", 2.5}});
  ended.by = protocol::Role::kSupervisor;
  r.record_event(ended);
  protocol::Stats stats;
  stats.time_s = 5.0;
  stats.window_s = 5.0;
  stats.voiced_fraction = 0.5;
  r.record_stats(stats);
}

TEST(Recorder, WritesAPrivateFolderWithTheLogTheCsvAndASummary) {
  TempDir tmp;
  RecorderOptions options;
  options.sessions_dir = tmp.path / "sessions";
  options.source = "demo";
  Recorder r(options, [](const std::string& m, bool) { ADD_FAILURE() << "unexpected problem: " << m; });
  r.start();
  record_known_session(r);
  r.stop();

  const fs::path folder = r.folder();
  ASSERT_TRUE(fs::is_directory(folder));
  EXPECT_EQ(mode_of(options.sessions_dir), 0700u);
  EXPECT_EQ(mode_of(folder), 0700u);
  for (const char* name : {"session.jsonl", "frames.csv", "summary.json"}) EXPECT_EQ(mode_of(folder / name), 0600u) << name;

  const auto log = lines_of(folder / "session.jsonl");
  ASSERT_EQ(log.size(), 1u + 1000u + 2u + 1u);
  const Json head = Json::parse(log[0]);
  EXPECT_EQ(head["type"], "session");
  EXPECT_EQ(head["format"], "pitchwire.session.v1");
  EXPECT_EQ(head["source"], "demo");
  int settled = 0, events = 0, stats = 0;
  for (std::size_t i = 1; i < log.size(); ++i) {
    const Json j = Json::parse(log[i]);  // every line is a JSON object
    settled += j["type"] == "settled";
    events += j["type"] == "event";
    stats += j["type"] == "stats";
  }
  EXPECT_EQ(settled, 1000);
  EXPECT_EQ(events, 2);
  EXPECT_EQ(stats, 1);
  // The exercise's own file, private, with its summary and who ended it.
  const fs::path exercise_file = folder / "exercise-01-sustained_vowel.json";
  ASSERT_TRUE(fs::exists(exercise_file));
  EXPECT_EQ(mode_of(exercise_file), 0600u);
  const Json ex = read_json(exercise_file);
  EXPECT_EQ(ex["preset"], "sustained_vowel");
  EXPECT_EQ(ex["label"], "first try");
  EXPECT_DOUBLE_EQ(ex["summary"]["voiced_s"].get<double>(), 2.5);
  EXPECT_DOUBLE_EQ(ex["ended_s"].get<double>(), 5.0);
  EXPECT_EQ(ex["by"], "supervisor");
  const Json frame = Json::parse(log[501]);
  EXPECT_EQ(frame["index"], 500);
  EXPECT_DOUBLE_EQ(frame["time_s"].get<double>(), 2.5);
  EXPECT_DOUBLE_EQ(frame["f0_hz"].get<double>(), 200.0);

  const auto csv = lines_of(folder / "frames.csv");
  ASSERT_EQ(csv.size(), 1001u);
  EXPECT_EQ(csv[0], "time_s,f0_hz,live_f0_hz,voicing,confidence,level_dbfs");
  EXPECT_EQ(csv[1], "0.0000,,,0.0100,0.0000,-20.00");
  EXPECT_EQ(csv[501], "2.5000,200.000,,0.9800,0.0000,-20.00");

  const Json s = read_json(folder / "summary.json");
  EXPECT_EQ(s["closed"], "stopped");
  EXPECT_EQ(s["frames"], 1000);
  EXPECT_DOUBLE_EQ(s["voiced_s"].get<double>(), 2.5);
  EXPECT_DOUBLE_EQ(s["duration_s"].get<double>(), 5.0);  // the last thing recorded: the exercise ended at 5 s
  EXPECT_EQ(s["exercises"], 1);
  // The median of 500 frames at 200 Hz, from 10-cent bins: within 5 cents of 200 Hz.
  EXPECT_LT(std::abs(1200.0 * std::log2(s["f0_p50_hz"].get<double>() / 200.0)), 5.0);
  EXPECT_EQ(s["markers"], 1);
  EXPECT_EQ(r.lines_dropped(), 0);
}

TEST(Recorder, AnUnfinishedSessionIsClosedFromItsLogLeavingATornLineOut) {
  TempDir tmp;
  const fs::path sessions = tmp.path / "sessions";
  RecorderOptions options;
  options.sessions_dir = sessions;
  fs::path folder;
  {
    Recorder r(options, nullptr);
    r.start();
    record_known_session(r);
    r.stop();
    folder = r.folder();
  }
  // As if killed: no summary, and a line cut short by the kill.
  fs::remove(folder / "summary.json");
  {
    std::ofstream out(folder / "session.jsonl", std::ios::app);
    out << R"({"type":"settled","index":1000,"time_s":5.0,"f0_h)";
  }
  const auto closed = Recorder::close_unfinished(sessions);
  ASSERT_EQ(closed.size(), 1u);
  EXPECT_EQ(closed[0], folder);
  const Json s = read_json(folder / "summary.json");
  EXPECT_EQ(s["closed"], "recovered");
  EXPECT_EQ(s["frames"], 1000);
  EXPECT_DOUBLE_EQ(s["voiced_s"].get<double>(), 2.5);
  EXPECT_EQ(s["markers"], 1);
  EXPECT_EQ(mode_of(folder / "summary.json"), 0600u);
  EXPECT_TRUE(Recorder::close_unfinished(sessions).empty());  // closed once only
}

TEST(Recorder, AFolderThatCannotBeMadeIsReportedAndRecordingNeverBlocks) {
  TempDir tmp;
  { std::ofstream(tmp.path / "not-a-folder") << "x"; }
  RecorderOptions options;
  options.sessions_dir = tmp.path / "not-a-folder" / "sessions";
  std::vector<std::string> problems;
  std::mutex m;
  Recorder r(options, [&](const std::string& message, bool resolved) {
    const std::lock_guard lock(m);
    if (!resolved) problems.push_back(message);
  });
  r.start();
  const auto t0 = std::chrono::steady_clock::now();
  record_known_session(r);  // returns at once although nothing can be written
  EXPECT_LT(std::chrono::steady_clock::now() - t0, std::chrono::seconds(1));
  for (int i = 0; i < 100; ++i) {
    {
      const std::lock_guard lock(m);
      if (!problems.empty()) break;
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  r.stop();
  const std::lock_guard lock(m);
  ASSERT_EQ(problems.size(), 1u);  // reported once, not once per line
  EXPECT_NE(problems[0].find((tmp.path / "not-a-folder").string()), std::string::npos) << problems[0];
  EXPECT_GT(r.lines_dropped(), 0);
}

// A disk that fills mid-session, made with a file size limit (RLIMIT_FSIZE; SIGXFSZ ignored, so writes past
// it fail with EFBIG as on a full disk), and stays full past a retry. The failure is reported once; what was
// written stays readable; when writing works again that is reported, gap lines count every line lost
// meanwhile, and an exercise's file that fell due meanwhile is written.
TEST(Recorder, ADiskThatFillsIsReportedOnceAndWritingResumesWithAGapLine) {
  TempDir tmp;
  RecorderOptions options;
  options.sessions_dir = tmp.path / "sessions";
  std::mutex m;
  std::vector<std::pair<std::string, bool>> reports;
  Recorder r(options, [&](const std::string& message, bool resolved) {
    const std::lock_guard lock(m);
    reports.emplace_back(message, resolved);
  });
  auto count = [&](bool resolved) {
    const std::lock_guard lock(m);
    return std::count_if(reports.begin(), reports.end(), [&](const auto& x) { return x.second == resolved; });
  };
  ::signal(SIGXFSZ, SIG_IGN);
  rlimit old{};
  ::getrlimit(RLIMIT_FSIZE, &old);
  rlimit small = old;
  small.rlim_cur = 64 * 1024;
  ASSERT_EQ(::setrlimit(RLIMIT_FSIZE, &small), 0);
  r.start();
  std::int64_t index = 0;
  auto feed = [&](int frames) {
    for (int i = 0; i < frames; ++i, ++index) {
      dsp::SettledFrame f;
      f.index = index;
      f.time_s = static_cast<double>(index) * 0.005;
      f.f0_hz = 180.0f;
      r.record_settled(f);
    }
  };
  for (int round = 0; round < 100 && count(false) == 0; ++round) {  // about 130 bytes a line: full after ~500
    feed(100);
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  ASSERT_EQ(count(false), 1) << "no problem reported with a 64 KiB file limit";
  feed(200);  // lost: the disk is still full
  protocol::Exercise exercise{"sustained_vowel", "", 1.0};
  r.record_event(protocol::exercise_ended_event(2.0, exercise, protocol::Json{{"voiced_s", 1.0}}));
  std::this_thread::sleep_for(std::chrono::milliseconds(3500));  // a retry comes and fails as well
  feed(100);
  std::this_thread::sleep_for(std::chrono::milliseconds(300));
  EXPECT_EQ(count(false), 1);  // reported once, not per line or per retry
  ASSERT_EQ(::setrlimit(RLIMIT_FSIZE, &old), 0);  // room again
  for (int round = 0; round < 100 && count(true) == 0; ++round) {
    feed(10);
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  r.stop();
  EXPECT_EQ(count(true), 1) << "writing again was not reported";
  {
    const std::lock_guard lock(m);
    EXPECT_NE(reports[0].first.find(r.folder().string()), std::string::npos) << reports[0].first;
    EXPECT_NE(reports[0].first.find("too large"), std::string::npos) << reports[0].first;  // strerror(EFBIG)
  }
  const auto log = lines_of(r.folder() / "session.jsonl");
  std::size_t parsed = 0, gaps = 0, torn = 0;
  std::int64_t lost = 0;
  for (const auto& line : log) {
    const Json j = Json::parse(line, nullptr, false);
    if (j.is_discarded()) {
      ++torn;  // the line the limit cut
      continue;
    }
    ++parsed;
    if (j["type"] == "gap") {
      ++gaps;
      lost += j["lines_lost"].get<std::int64_t>();
    }
  }
  EXPECT_GT(parsed, 300u);  // what was written before the disk filled stays
  EXPECT_LE(torn, 1u);
  EXPECT_GE(gaps, 1u);
  EXPECT_GE(lost, 301);  // every line given while the disk was full: 200 + 100 frames and the event
  // The exercise's own file, due while the disk was full, is written once there is room.
  EXPECT_TRUE(fs::exists(r.folder() / "exercise-01-sustained_vowel.json"));
  EXPECT_TRUE(fs::exists(r.folder() / "summary.json"));
}

// The input audio, with record_audio set: audio.wav (mode 0600) holds every sample given, in order, as
// 24-bit PCM at the input's rate, and the log's first line names it.
std::vector<float> read_wav(const fs::path& path, SF_INFO& info) {
  info = SF_INFO{};
  SNDFILE* f = sf_open(path.c_str(), SFM_READ, &info);
  if (!f) return {};
  std::vector<float> out(static_cast<std::size_t>(info.frames * info.channels));
  out.resize(static_cast<std::size_t>(sf_readf_float(f, out.data(), info.frames)));
  sf_close(f);
  return out;
}

TEST(Recorder, KeepsTheInputAudioAsWavWhenAskedTo) {
  TempDir tmp;
  RecorderOptions options;
  options.sessions_dir = tmp.path / "sessions";
  options.record_audio = true;
  options.sample_rate_hz = 16000.0;
  Recorder r(options, [](const std::string& m, bool) { ADD_FAILURE() << "unexpected problem: " << m; });
  r.start();
  std::vector<float> sent;
  for (int block = 0; block < 40; ++block) {  // 1 s of a 220 Hz sine at amplitude 0.5, in blocks of 400
    std::vector<float> x(400);
    for (std::size_t i = 0; i < x.size(); ++i) {
      const double n = static_cast<double>(sent.size() + i);
      x[i] = static_cast<float>(0.5 * std::sin(2.0 * 3.14159265358979 * 220.0 * n / 16000.0));
    }
    r.record_audio(x);
    sent.insert(sent.end(), x.begin(), x.end());
    if (block % 10 == 0) std::this_thread::sleep_for(std::chrono::milliseconds(120));  // across writes
  }
  r.stop();
  const fs::path wav = r.folder() / "audio.wav";
  ASSERT_TRUE(fs::exists(wav));
  EXPECT_EQ(mode_of(wav), 0600u);
  SF_INFO info;
  const std::vector<float> got = read_wav(wav, info);
  EXPECT_EQ(info.samplerate, 16000);
  EXPECT_EQ(info.channels, 1);
  EXPECT_EQ(info.format, SF_FORMAT_WAV | SF_FORMAT_PCM_24);
  ASSERT_EQ(got.size(), sent.size());
  for (std::size_t i = 0; i < got.size(); ++i) {
    ASSERT_NEAR(got[i], sent[i], 1.0 / (1 << 22)) << i;  // 24-bit quantisation
  }
  EXPECT_EQ(r.audio_samples_lost(), 0);
  const Json head = Json::parse(lines_of(r.folder() / "session.jsonl").at(0));
  EXPECT_EQ(head["audio_file"], "audio.wav");
  EXPECT_EQ(head["sample_rate_hz"], 16000.0);
}

// A problem with audio.wav (here its size hits a file size limit standing in for a full disk) is reported,
// and the log, the exercise files and the summary go on being written: the audio never stops the record.
TEST(Recorder, AnAudioFileThatCannotGrowDoesNotStopTheLog) {
  TempDir tmp;
  RecorderOptions options;
  options.sessions_dir = tmp.path / "sessions";
  options.record_audio = true;
  options.sample_rate_hz = 16000.0;
  std::mutex m;
  std::vector<std::string> problems;
  Recorder r(options, [&](const std::string& message, bool resolved) {
    const std::lock_guard lock(m);
    if (!resolved) problems.push_back(message);
  });
  ::signal(SIGXFSZ, SIG_IGN);
  rlimit old{};
  ::getrlimit(RLIMIT_FSIZE, &old);
  rlimit small = old;
  small.rlim_cur = 96 * 1024;  // 2 s of 16 kHz 24-bit audio; the log stays far below
  ASSERT_EQ(::setrlimit(RLIMIT_FSIZE, &small), 0);
  r.start();
  const std::vector<float> block(1600, 0.25f);  // 0.1 s
  for (int i = 0; i < 40; ++i) {                // 4 s of audio, 400 frames
    r.record_audio(block);
    for (int k = 0; k < 10; ++k) {
      dsp::SettledFrame f;
      f.index = i * 10 + k;
      f.time_s = static_cast<double>(f.index) * 0.01;
      f.f0_hz = 200.0f;
      r.record_settled(f);
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(30));
  }
  protocol::Exercise exercise{"sustained_vowel", "", 1.0};
  r.record_event(protocol::exercise_ended_event(3.5, exercise, protocol::Json{{"voiced_s", 2.0}}));
  std::this_thread::sleep_for(std::chrono::milliseconds(300));
  r.stop();
  ASSERT_EQ(::setrlimit(RLIMIT_FSIZE, &old), 0);
  {
    const std::lock_guard lock(m);
    ASSERT_EQ(problems.size(), 1u);
    EXPECT_NE(problems[0].find("audio.wav"), std::string::npos) << problems[0];
  }
  int settled = 0;
  for (const auto& line : lines_of(r.folder() / "session.jsonl")) settled += Json::parse(line)["type"] == "settled";
  EXPECT_EQ(settled, 400);
  EXPECT_EQ(r.lines_dropped(), 0);
  EXPECT_TRUE(fs::exists(r.folder() / "exercise-01-sustained_vowel.json"));
  EXPECT_TRUE(fs::exists(r.folder() / "summary.json"));
  SF_INFO info;
  const std::vector<float> got = read_wav(r.folder() / "audio.wav", info);
  EXPECT_GT(got.size(), 16000u);  // what fitted before the limit is a readable WAV
  EXPECT_LT(got.size(), 4u * 16000u);
  EXPECT_GT(r.audio_samples_lost(), 0);
}

// Without record_audio nothing is kept, whatever is handed over.
TEST(Recorder, KeepsNoAudioUnlessAskedTo) {
  TempDir tmp;
  RecorderOptions options;
  options.sessions_dir = tmp.path / "sessions";
  Recorder r(options, [](const std::string& m, bool) { ADD_FAILURE() << "unexpected problem: " << m; });
  r.start();
  std::vector<float> x(4000, 0.25f);
  r.record_audio(x);
  r.stop();
  EXPECT_FALSE(fs::exists(r.folder() / "audio.wav"));
  EXPECT_FALSE(Json::parse(lines_of(r.folder() / "session.jsonl").at(0)).contains("audio_file"));
}

// Audio that does not fit in the queue is counted and written as silence in its place, so that audio.wav
// stays on the audio clock: every block is either whole at its place or silent there.
TEST(Recorder, AudioThatDoesNotFitIsSilenceInItsPlace) {
  TempDir tmp;
  RecorderOptions options;
  options.sessions_dir = tmp.path / "sessions";
  options.record_audio = true;
  options.sample_rate_hz = 8000.0;
  options.audio_queue_s = 0.125;  // 1000 samples
  Recorder r(options, [](const std::string& m, bool) { ADD_FAILURE() << "unexpected problem: " << m; });
  r.start();
  constexpr int kBlocks = 12, kBlock = 600;
  for (int b = 0; b < kBlocks; ++b) {
    r.record_audio(std::vector<float>(kBlock, 0.01f * static_cast<float>(b + 1)));
    if (b % 4 == 3) std::this_thread::sleep_for(std::chrono::milliseconds(250));  // let it drain
  }
  r.stop();
  SF_INFO info;
  const std::vector<float> got = read_wav(r.folder() / "audio.wav", info);
  ASSERT_EQ(got.size(), static_cast<std::size_t>(kBlocks * kBlock));
  std::int64_t silent = 0;
  for (int b = 0; b < kBlocks; ++b) {
    SCOPED_TRACE(b);
    const float want = 0.01f * static_cast<float>(b + 1);
    const auto first = got.begin() + b * kBlock;
    const bool whole = std::all_of(first, first + kBlock, [&](float v) { return std::fabs(v - want) < 1e-5f; });
    const bool zero = std::all_of(first, first + kBlock, [](float v) { return v == 0.0f; });
    EXPECT_TRUE(whole || zero);
    silent += zero ? kBlock : 0;
  }
  EXPECT_GT(r.audio_samples_lost(), 0);  // at most one 600-sample block fits in 1000 at a time
  EXPECT_EQ(silent, r.audio_samples_lost());
}

}  // namespace
}  // namespace pitchwire::daemon
