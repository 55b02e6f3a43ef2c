// Tests of the real `pitchwire` executable (path in PITCHWIRE_EXE), run through the shell on files
// the tests write into a temporary folder.
#include <gtest/gtest.h>
#include <sndfile.h>
#include <sys/wait.h>

#include <cctype>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>
#include <vector>

#include "test_audio.h"

#ifndef PITCHWIRE_EXE
#error "PITCHWIRE_EXE must name the pitchwire executable"
#endif

namespace {

using pitchwire::testing::interleave;
using pitchwire::testing::sine16;
using pitchwire::testing::TempDir;
using pitchwire::testing::write_float_wav;
using pitchwire::testing::write_sound;
using pitchwire::testing::write_text;

constexpr int kWav16 = SF_FORMAT_WAV | SF_FORMAT_PCM_16;

// The column list of `pitchwire analyze` (clients/cli/src/frame_format.h).
constexpr const char* kCsvHeader = "time_s,f0_hz,f0_live_hz,voicing,confidence,level_dbfs";

std::string quoted(const std::string& s) {
  std::string out = "'";
  for (const char c : s) {
    if (c == '\'') {
      out += "'\\''";
    } else {
      out += c;
    }
  }
  return out + "'";
}

std::string read_file(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

std::vector<std::string> lines_of(const std::string& text) {
  std::vector<std::string> lines;
  std::istringstream in(text);
  for (std::string line; std::getline(in, line);) lines.push_back(line);
  return lines;
}

struct Result {
  int exit_code = -1;
  std::string out;
  std::string err;
};

// Runs `pitchwire <args>` (args already shell-quoted where needed) with stdin from /dev/null.
Result run_pitchwire(const TempDir& dir, const std::string& args) {
  const auto err_path = dir / "stderr.txt";
  const std::string command =
      quoted(PITCHWIRE_EXE) + " " + args + " </dev/null 2>" + quoted(err_path.string());
  Result run;
  FILE* pipe = ::popen(command.c_str(), "r");
  if (pipe == nullptr) {
    ADD_FAILURE() << "popen failed: " << command;
    return run;
  }
  char buf[65536];
  for (std::size_t n; (n = std::fread(buf, 1, sizeof buf, pipe)) > 0;) run.out.append(buf, n);
  const int status = ::pclose(pipe);
  run.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
  run.err = read_file(err_path);
  return run;
}

Result analyze(const TempDir& dir, const std::filesystem::path& file, const std::string& options = "") {
  return run_pitchwire(dir, "analyze " + quoted(file.string()) + (options.empty() ? "" : " " + options));
}

std::vector<std::string> split_csv(const std::string& line) {
  std::vector<std::string> fields;
  std::string field;
  std::istringstream in(line);
  while (std::getline(in, field, ',')) fields.push_back(field);
  if (!line.empty() && line.back() == ',') fields.emplace_back();
  return fields;
}

// A non-negative (or, for decimals < 0, any) decimal number with exactly `decimals` digits after the
// point; decimals < 0 accepts any count of at least one.
bool is_fixed(const std::string& text, int decimals) {
  std::size_t i = 0;
  if (decimals < 0 && i < text.size() && text[i] == '-') ++i;
  const std::size_t int_start = i;
  while (i < text.size() && std::isdigit(static_cast<unsigned char>(text[i]))) ++i;
  if (i == int_start || i == text.size() || text[i] != '.') return false;
  const std::size_t frac_start = ++i;
  while (i < text.size() && std::isdigit(static_cast<unsigned char>(text[i]))) ++i;
  const std::size_t frac = i - frac_start;
  return i == text.size() && (decimals < 0 ? frac > 0 : frac == static_cast<std::size_t>(decimals));
}

// One row per hop for the file duration: frames are centred at t0 + k * hop, t0 in [0, hop), and every
// centre with time <= duration gets a row (pitch_tracker.h, PitchTracker::flush). Checks the rows'
// times against that and returns the times.
std::vector<double> check_rows_cover_duration(const std::vector<std::string>& rows, double duration_s,
                                              double hop_s) {
  std::vector<double> times;
  for (const std::string& row : rows) times.push_back(std::stod(split_csv(row).at(0)));
  if (times.empty()) {
    ADD_FAILURE() << "no rows";
    return times;
  }
  const double t0 = times.front();
  EXPECT_GE(t0, 0.0);
  EXPECT_LT(t0, hop_s);
  for (std::size_t k = 0; k < times.size(); ++k) {
    // time_s is written with 6 decimals: half a microsecond of rounding.
    EXPECT_NEAR(times[k], t0 + static_cast<double>(k) * hop_s, 1e-6) << "row " << k;
  }
  const auto expected_rows = static_cast<std::size_t>(std::floor((duration_s - t0) / hop_s + 1e-9)) + 1;
  EXPECT_EQ(times.size(), expected_rows) << "duration " << duration_s << " s, hop " << hop_s << " s, t0 " << t0;
  return times;
}

// Bad input: exit code 2 and exactly one line on stderr, "pitchwire analyze: FILE: <problem>".
void expect_bad_input(const Result& run, const std::filesystem::path& file, const std::string& problem_part) {
  EXPECT_EQ(run.exit_code, 2);
  const std::string prefix = "pitchwire analyze: " + file.string() + ": ";
  const std::vector<std::string> lines = lines_of(run.err);
  ASSERT_EQ(lines.size(), 1u) << run.err;
  EXPECT_EQ(lines[0].rfind(prefix, 0), 0u) << lines[0];
  EXPECT_NE(lines[0].find(problem_part), std::string::npos) << lines[0];
}

TEST(PitchwireAnalyze, CsvHeaderAndOneRowPerHop) {
  TempDir dir;
  const auto file = dir / "tone.wav";
  // 16197 samples at 16 kHz = 1.0123125 s: no hop centre (multiples of 5 ms) lies near the end.
  write_sound(file, kWav16, 16000, 1, sine16(16197, 220.0, 16000.0));
  const Result run = analyze(dir, file);
  ASSERT_EQ(run.exit_code, 0) << run.err;
  EXPECT_EQ(run.err, "");
  const std::vector<std::string> lines = lines_of(run.out);
  ASSERT_FALSE(lines.empty());
  EXPECT_EQ(lines[0], kCsvHeader);
  const std::vector<std::string> rows(lines.begin() + 1, lines.end());
  // Default hop: TrackerConfig::hop_ms = 5 ms (pitch_tracker.h).
  check_rows_cover_duration(rows, 16197.0 / 16000.0, 0.005);

  // Six fields: time_s with 6 decimals, F0 values with 3 decimals or empty, then three numbers.
  for (const std::string& row : rows) {
    const std::vector<std::string> fields = split_csv(row);
    ASSERT_EQ(fields.size(), 6u) << row;
    EXPECT_TRUE(is_fixed(fields[0], 6)) << row;
    EXPECT_TRUE(fields[1].empty() || is_fixed(fields[1], 3)) << row;
    EXPECT_TRUE(fields[2].empty() || is_fixed(fields[2], 3)) << row;
    for (std::size_t i = 3; i < 6; ++i) EXPECT_TRUE(is_fixed(fields[i], -1)) << row;
  }
}

TEST(PitchwireAnalyze, HopAndChannelOptions) {
  TempDir dir;
  const auto file = dir / "stereo.wav";
  // 33161 frames at 44.1 kHz = 0.75195 s.
  write_sound(file, kWav16, 44100, 2,
              interleave({sine16(33161, 150.0, 44100.0), sine16(33161, 300.0, 44100.0)}));
  for (const std::string options : {"--hop-ms 10 --channel 2", "--hop-ms 2.5 --settle-ms 0 --no-hum-cancel",
                                     "--hop-ms 10 --f0-min 80 --f0-max 600"}) {
    SCOPED_TRACE(options);
    const Result run = analyze(dir, file, options);
    ASSERT_EQ(run.exit_code, 0) << run.err;
    const std::vector<std::string> lines = lines_of(run.out);
    ASSERT_FALSE(lines.empty());
    EXPECT_EQ(lines[0], kCsvHeader);
    const double hop_s = options.find("2.5") != std::string::npos ? 0.0025 : 0.010;
    check_rows_cover_duration({lines.begin() + 1, lines.end()}, 33161.0 / 44100.0, hop_s);
  }
}

TEST(PitchwireAnalyze, JsonLinesParse) {
  TempDir dir;
  const auto file = dir / "tone.wav";
  write_sound(file, kWav16, 16000, 1, sine16(8123, 180.0, 16000.0));
  const Result csv = analyze(dir, file);
  const Result run = analyze(dir, file, "--format jsonl");
  ASSERT_EQ(run.exit_code, 0) << run.err;
  const std::vector<std::string> lines = lines_of(run.out);
  // Same frames as the CSV, without a header line.
  EXPECT_EQ(lines.size() + 1, lines_of(csv.out).size());
  for (const std::string& line : lines) {
    nlohmann::json row;
    ASSERT_NO_THROW(row = nlohmann::json::parse(line)) << line;
    ASSERT_TRUE(row.is_object()) << line;
    for (const char* key : {"time_s", "voicing", "confidence", "level_dbfs"}) {
      EXPECT_TRUE(row.contains(key) && row[key].is_number()) << key << " in " << line;
    }
    for (const char* key : {"f0_hz", "f0_live_hz"}) {
      EXPECT_TRUE(row.contains(key) && (row[key].is_number() || row[key].is_null())) << key << " in " << line;
    }
    EXPECT_EQ(row.size(), 6u) << line;
  }
}

TEST(PitchwireAnalyze, SmoothingColumnsOnlyWhenAsked) {
  TempDir dir;
  const auto file = dir / "gap.wav";
  // 0.4 s of 200 Hz, 30 ms of silence, 0.4 s of 200 Hz at 16 kHz.
  std::vector<float> x = sine16(13280, 200.0, 16000.0);
  for (std::size_t i = 6400; i < 6880; ++i) x[i] = 0.0f;
  write_sound(file, kWav16, 16000, 1, x);

  const Result plain = analyze(dir, file);
  ASSERT_EQ(plain.exit_code, 0) << plain.err;
  EXPECT_EQ(lines_of(plain.out).at(0), kCsvHeader);

  const Result smooth = analyze(dir, file, "--smooth");
  ASSERT_EQ(smooth.exit_code, 0) << smooth.err;
  const std::vector<std::string> lines = lines_of(smooth.out);
  ASSERT_FALSE(lines.empty());
  EXPECT_EQ(lines[0], std::string(kCsvHeader) + ",f0_smoothed_hz,bridged");
  // The same rows as without smoothing, with two more fields; no frame is bridged unless asked.
  ASSERT_EQ(lines.size(), lines_of(plain.out).size());
  std::size_t gap_rows = 0, bridged_rows = 0;
  for (std::size_t i = 1; i < lines.size(); ++i) {
    const std::vector<std::string> fields = split_csv(lines[i]);
    ASSERT_EQ(fields.size(), 8u) << lines[i];
    EXPECT_EQ(fields[7], "0") << lines[i];
    EXPECT_EQ(fields[1].empty(), fields[6].empty()) << lines[i];  // unvoiced stays unvoiced
    const double t = std::stod(fields[0]);
    if (t > 0.41 && t < 0.42 && fields[1].empty()) ++gap_rows;
  }
  EXPECT_GT(gap_rows, 0u);

  // Bridging a gap shorter than --bridge-ms fills it, and marks the frames.
  const Result bridged = analyze(dir, file, "--smooth --bridge-ms 60");
  ASSERT_EQ(bridged.exit_code, 0) << bridged.err;
  for (const std::string& line : lines_of(bridged.out)) {
    const std::vector<std::string> fields = split_csv(line);
    if (fields.size() == 8 && fields[7] == "1") {
      ++bridged_rows;
      EXPECT_TRUE(fields[1].empty()) << line;  // only unvoiced frames are bridged
      EXPECT_NEAR(std::stod(fields[6]), 200.0, 2.0) << line;
    }
  }
  EXPECT_GT(bridged_rows, 0u);

  const Result lonely = analyze(dir, file, "--bridge-ms 60");
  EXPECT_EQ(lonely.exit_code, 2);
  EXPECT_NE(lonely.err.find("--bridge-ms needs --smooth"), std::string::npos) << lonely.err;
}

TEST(PitchwireAnalyze, MissingFile) {
  TempDir dir;
  const auto file = dir / "absent.wav";
  const Result run = analyze(dir, file);
  expect_bad_input(run, file, "no such file");
  EXPECT_EQ(run.out, "");
}

TEST(PitchwireAnalyze, Directory) {
  TempDir dir;
  const Result run = analyze(dir, dir.path());
  expect_bad_input(run, dir.path(), "directory");
  EXPECT_EQ(run.out, "");
}

TEST(PitchwireAnalyze, TextFileNamedWav) {
  TempDir dir;
  const auto file = dir / "x.wav";
  write_text(file, "this is a text file\n");
  const Result run = analyze(dir, file);
  expect_bad_input(run, file, "not an audio file");
  EXPECT_EQ(run.out, "");
}

TEST(PitchwireAnalyze, EmptyWav) {
  TempDir dir;
  const auto file = dir / "empty.wav";
  write_sound(file, kWav16, 16000, 1, {});
  const Result run = analyze(dir, file);
  expect_bad_input(run, file, "no audio samples");
  EXPECT_EQ(run.out, "");
}

TEST(PitchwireAnalyze, TruncatedWav) {
  TempDir dir;
  const auto file = dir / "cut.wav";
  write_sound(file, kWav16, 16000, 1, sine16(16000, 220.0, 16000.0));
  // 44-byte header + 32000 data bytes; cut in the middle of the data.
  std::filesystem::resize_file(file, 44 + 16000);
  const Result run = analyze(dir, file);
  expect_bad_input(run, file, "truncated");
  EXPECT_EQ(run.out, "");
}

TEST(PitchwireAnalyze, NanStopsWithItsTime) {
  TempDir dir;
  const auto file = dir / "nan.wav";
  std::vector<float> samples = sine16(16000, 200.0, 16000.0);
  samples[9000] = std::numeric_limits<float>::quiet_NaN();  // 9000 / 16000 Hz = 0.5625 s
  write_float_wav(file, 16000, 1, samples);
  const Result run = analyze(dir, file);
  expect_bad_input(run, file, "NaN at 0.562500 s");
  // The rows before the bad sample are written (the header at least), none after it.
  const std::vector<std::string> lines = lines_of(run.out);
  ASSERT_FALSE(lines.empty());
  EXPECT_EQ(lines[0], kCsvHeader);
  for (std::size_t i = 1; i < lines.size(); ++i) EXPECT_LE(std::stod(split_csv(lines[i]).at(0)), 0.5625);
}

TEST(PitchwireAnalyze, ChannelOutOfRange) {
  TempDir dir;
  const auto file = dir / "mono.wav";
  write_sound(file, kWav16, 16000, 1, sine16(1600, 220.0, 16000.0));
  const Result run = analyze(dir, file, "--channel 2");
  expect_bad_input(run, file, "channel 2 out of range");
  EXPECT_EQ(run.out, "");
}

TEST(PitchwireAnalyze, SampleRateTheTrackerDoesNotTake) {
  TempDir dir;
  const auto file = dir / "fast.wav";
  // TrackerConfig takes input rates 8000..96000 Hz (pitch_tracker.h); 4000 Hz is outside.
  write_sound(file, kWav16, 4000, 1, sine16(4000, 220.0, 4000.0));
  const Result run = analyze(dir, file);
  expect_bad_input(run, file, "sample_rate");
}

TEST(PitchwireAnalyze, BadOptionValuesGetTheTrackersMessage) {
  TempDir dir;
  const auto file = dir / "tone.wav";
  write_sound(file, kWav16, 16000, 1, sine16(1600, 220.0, 16000.0));
  // Ranges from TrackerConfig (pitch_tracker.h): hop 2.5..10 ms, settle 0..500 ms, f0_min below f0_max.
  for (const std::string options : {"--hop-ms 20", "--hop-ms 1", "--settle-ms 900", "--f0-min 600 --f0-max 200"}) {
    SCOPED_TRACE(options);
    const Result run = analyze(dir, file, options);
    EXPECT_EQ(run.exit_code, 2);
    const std::vector<std::string> lines = lines_of(run.err);
    ASSERT_EQ(lines.size(), 1u) << run.err;
    EXPECT_EQ(lines[0].rfind("pitchwire analyze: ", 0), 0u) << lines[0];
    EXPECT_EQ(run.out, "");
  }
}

TEST(PitchwireAnalyze, UsageErrorsExitTwo) {
  TempDir dir;
  const auto file = dir / "tone.wav";
  write_sound(file, kWav16, 16000, 1, sine16(1600, 220.0, 16000.0));
  for (const std::string& args :
       {std::string("analyze"), "analyze " + quoted(file.string()) + " --hop-ms abc",
        "analyze " + quoted(file.string()) + " --format xml", "analyze " + quoted(file.string()) + " --bogus",
        std::string(""), std::string("frobnicate")}) {
    SCOPED_TRACE(args);
    const Result run = run_pitchwire(dir, args);
    EXPECT_EQ(run.exit_code, 2);
    EXPECT_FALSE(run.err.empty());
    EXPECT_EQ(run.out, "");
  }
}

TEST(PitchwireAnalyze, ClosedStdoutEndsQuietly) {
  TempDir dir;
  const auto file = dir / "long.wav";
  // 40 s at 8 kHz: 8000 rows of about 50 bytes, far more than a pipe holds, so writes meet EPIPE.
  write_sound(file, kWav16, 8000, 1, sine16(8000 * 40, 200.0, 8000.0));
  const auto err_path = dir / "stderr.txt";
  const std::string command = "bash -c " + quoted(quoted(PITCHWIRE_EXE) + " analyze " + quoted(file.string()) +
                                                  " 2>" + quoted(err_path.string()) +
                                                  " | head -n 2; exit ${PIPESTATUS[0]}");
  FILE* pipe = ::popen(command.c_str(), "r");
  ASSERT_NE(pipe, nullptr);
  std::string out;
  char buf[4096];
  for (std::size_t n; (n = std::fread(buf, 1, sizeof buf, pipe)) > 0;) out.append(buf, n);
  const int status = ::pclose(pipe);
  ASSERT_TRUE(WIFEXITED(status));
  EXPECT_EQ(WEXITSTATUS(status), 0);
  EXPECT_EQ(read_file(err_path), "");
  EXPECT_EQ(lines_of(out).size(), 2u);
}

TEST(PitchwireCommand, VersionAndHelp) {
  TempDir dir;
  const Result version = run_pitchwire(dir, "--version");
  EXPECT_EQ(version.exit_code, 0);
  EXPECT_EQ(version.out.rfind("pitchwire ", 0), 0u) << version.out;
  const Result help = run_pitchwire(dir, "--help");
  EXPECT_EQ(help.exit_code, 0);
  EXPECT_NE(help.out.find("analyze"), std::string::npos);
  EXPECT_NE(help.out.find("demo"), std::string::npos);
  const Result analyze_help = run_pitchwire(dir, "analyze --help");
  EXPECT_EQ(analyze_help.exit_code, 0);
  for (const char* option : {"--format", "--hop-ms", "--f0-min", "--f0-max", "--settle-ms", "--channel",
                             "--no-hum-cancel"}) {
    EXPECT_NE(analyze_help.out.find(option), std::string::npos) << option;
  }
}

TEST(PitchwireDemo, SummaryAndCsv) {
  TempDir dir;
  const auto csv = dir / "demo.csv";
  const Result run = run_pitchwire(dir, "demo --csv " + quoted(csv.string()));
  ASSERT_EQ(run.exit_code, 0) << run.err;
  for (const char* part : {"duration", "voiced time", "median F0", "semitones", "within 50 cents",
                           "voicing agreement", "not a medical device"}) {
    EXPECT_NE(run.out.find(part), std::string::npos) << part << " in\n" << run.out;
  }
  const std::vector<std::string> lines = lines_of(read_file(csv));
  ASSERT_GT(lines.size(), 1u);
  EXPECT_EQ(lines[0], kCsvHeader);
}

}  // namespace
