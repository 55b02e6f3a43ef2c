// Tests of `pitchwire report` (clients/cli/src/report.h): the reader and the page in-process on session folders
// the tests write (content known by construction, in the line formats of daemon/src/recorder.cpp), and the real
// executable (path in PITCHWIRE_EXE) for its errors, exit codes and the file it writes.
#include "report.h"

#include <gtest/gtest.h>
#include <sys/stat.h>
#include <sys/wait.h>

#include <cmath>
#include <cstdio>
#include <fstream>
#include <nlohmann/json.hpp>
#include <regex>
#include <sstream>
#include <string>
#include <vector>

#include "test_audio.h"

#ifndef PITCHWIRE_EXE
#error "PITCHWIRE_EXE must name the pitchwire executable"
#endif

namespace {

namespace fs = std::filesystem;
using nlohmann::json;
using pitchwire::cli::report::escape_html;
using pitchwire::cli::report::load_session;
using pitchwire::cli::report::render_html;
using pitchwire::cli::report::SessionError;
using pitchwire::cli::report::SessionRecord;
using pitchwire::testing::TempDir;
using pitchwire::testing::write_text;

constexpr double kHop = 0.005;

// A session log as the recorder writes it: a session line, settled lines, event lines.
class LogWriter {
 public:
  // extra: more members of the session line.
  explicit LogWriter(const json& extra = json::object()) {
    json head{{"type", "session"},
              {"format", "pitchwire.session.v1"},
              {"started_wall", "2026-12-02T10:15:00.000Z"},
              {"source", "demo"},
              {"hop_ms", 5.0},
              {"pid", 4242}};
    head.update(extra);
    text_ = head.dump() + "\n";
  }

  // Frames at the recorder's times (centre of hop k at (k + 0.5) * hop) from t0 up to t1, F0 from f0(t) (<= 0:
  // unvoiced).
  template <typename F>
  void frames(double t0, double t1, F f0) {
    for (; static_cast<double>(index_) * kHop + 0.5 * kHop < t1; ++index_) {
      const double t = static_cast<double>(index_) * kHop + 0.5 * kHop;
      if (t < t0) continue;
      const double f = f0(t);
      char line[256];
      if (f > 0) {
        std::snprintf(
            line, sizeof line,
            R"({"type":"settled","index":%lld,"time_s":%.4f,"f0_hz":%.3f,"live_f0_hz":%.3f,"voicing":0.9000,"confidence":0.8000,"level_dbfs":-20.00})",
            static_cast<long long>(index_), t, f, f);
      } else {
        std::snprintf(
            line, sizeof line,
            R"({"type":"settled","index":%lld,"time_s":%.4f,"f0_hz":null,"live_f0_hz":null,"voicing":0.1000,"confidence":0.0000,"level_dbfs":-60.00})",
            static_cast<long long>(index_), t);
      }
      text_ += line;
      text_ += "\n";
    }
  }

  void event(double t, const std::string& kind, const json& payload, const std::string& by = "") {
    json j{{"type", "event"},   {"wall", "2026-12-02T10:15:01.000Z"}, {"seq", 1}, {"kind", kind}, {"time_s", t},
           {"payload", payload}};
    if (!by.empty()) j["by"] = by;
    text_ += j.dump() + "\n";
  }

  void raw(const std::string& line) { text_ += line; }

  void write(const fs::path& folder) const {
    fs::create_directories(folder);
    write_text(folder / "session.jsonl", text_);
  }

 private:
  std::string text_;
  std::int64_t index_ = 0;
};

json band_changed(const std::string& name, const std::vector<std::tuple<std::string, double, double>>& bands) {
  json list = json::array();
  for (const auto& [n, lo, hi] : bands) list.push_back({{"name", n}, {"low_hz", lo}, {"high_hz", hi}});
  return {{"name", name}, {"bands", list}};
}

std::string read_file(const fs::path& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

std::string quoted(const std::string& s) {
  std::string out = "'";
  for (const char c : s) out += c == '\'' ? std::string("'\\''") : std::string(1, c);
  return out + "'";
}

struct Result {
  int exit_code = -1;
  std::string err;
};

// Runs `pitchwire report <args>` through the shell, after `prefix` (such as "umask 000; ").
Result run_report(const TempDir& dir, const std::string& args, const std::string& prefix = "") {
  const fs::path err = dir / "stderr.txt";
  const std::string command =
      prefix + quoted(PITCHWIRE_EXE) + " report " + args + " </dev/null >/dev/null 2>" + quoted(err.string());
  const int status = std::system(command.c_str());
  Result r;
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128;
  r.err = read_file(err);
  return r;
}

// The standard session of these tests: 2 s at 196 Hz (G3), 0.5 s unvoiced, 2 s at 247 Hz (B3); band "target"
// 180-220 Hz from t = 0; one exercise from 0.5 to 4.0 s with its file; two markers.
json exercise_file() {
  return {{"preset", "sustained_vowel"},
          {"label", "Vowel /a/"},
          {"started_s", 0.5},
          {"summary",
           {{"duration_s", 3.5},
            {"settled_s", 3.5},
            {"voiced_s", 3.0},
            {"voiced_fraction", 0.857},
            {"cycle_dose", 661.5},
            {"f0_p5_hz", 196.0},
            {"f0_p50_hz", 196.123},
            {"f0_p95_hz", 247.0},
            {"f0_range_st", 4.006},
            {"f0_sd_st", 1.911},
            {"bands", json::array({{{"name", "target"}, {"inside_fraction", 0.5}}})},
            {"measures", json::array({"voiced_s", "f0_sd_st"})}}},
          {"ended_s", 4.0},
          {"ended_wall", "2026-12-02T10:15:04.000Z"},
          {"by", "supervisor"}};
}

double two_notes(double t) { return t < 2.0 ? 196.0 : t < 2.5 ? 0.0 : 247.0; }

void write_standard_session(const fs::path& folder, const std::string& marker_label = "trial 1 onset") {
  LogWriter log;
  log.event(0.0, "band_changed", band_changed("target", {{"target", 180.0, 220.0}}), "supervisor");
  log.frames(0.0, 0.5, two_notes);
  log.event(0.5, "exercise_started", {{"preset", "sustained_vowel"}, {"label", "Vowel /a/"}, {"started_s", 0.5}},
            "supervisor");
  log.frames(0.5, 1.0, two_notes);
  log.event(1.0, "marker",
            {{"id", "m1"},
             {"label", marker_label},
             {"data", {{"trial", 1}}},
             {"sample", 48000},
             {"wall", "2026-12-02T10:15:01.000Z"}},
            "lab");
  log.frames(1.0, 3.5, two_notes);
  log.event(3.5, "marker",
            {{"id", "m2"}, {"label", "trial 2 onset"}, {"sample", 168000}, {"wall", "2026-12-02T10:15:03.500Z"}},
            "lab");
  log.frames(3.5, 4.0, two_notes);
  json ended = exercise_file();
  ended.erase("ended_s");
  ended.erase("ended_wall");
  ended.erase("by");
  log.event(4.0, "exercise_ended", ended, "supervisor");
  log.frames(4.0, 4.5, two_notes);
  log.write(folder);
  write_text(folder / "exercise-01-sustained_vowel.json", exercise_file().dump(2) + "\n");
}

// The cell of an exercise row with data-field="field".
std::string cell(const std::string& html, const std::string& field) {
  const std::regex re("data-field=\"" + field + "\">([^<]*)");
  std::smatch m;
  return std::regex_search(html, m, re) ? m[1].str() : std::string("(no cell " + field + ")");
}

// The contour path's subpaths, each as its list of (x, y).
std::vector<std::vector<std::pair<double, double>>> subpaths(const std::string& html) {
  std::vector<std::vector<std::pair<double, double>>> out;
  const std::regex re(R"re(id="contour-line"[^>]* d="([^"]*)")re");
  std::smatch m;
  if (!std::regex_search(html, m, re)) return out;
  std::istringstream in(m[1].str());
  char command = 0;
  while (in >> command) {
    if (command == 'M') out.emplace_back();
    double x = 0, y = 0;
    in >> x >> y;
    if (!out.empty()) out.back().emplace_back(x, y);
  }
  return out;
}

std::pair<double, double> svg_mapping(const std::string& html, const char* attribute) {
  const std::regex re(std::string(attribute) + R"re(="([-0-9.]+) ([-0-9.]+)")re");
  std::smatch m;
  if (!std::regex_search(html, m, re)) return {NAN, NAN};
  return {std::stod(m[1].str()), std::stod(m[2].str())};
}

// ---- errors -----------------------------------------------------------------------------------------------

TEST(ReportReader, AMissingFolderIsAnErrorNamingThePath) {
  TempDir dir;
  try {
    (void)load_session(dir / "nope");
    FAIL() << "no error";
  } catch (const SessionError& e) {
    EXPECT_EQ(std::string(e.what()), (dir / "nope").string() + ": no such folder");
  }
}

TEST(ReportReader, AnEmptyFolderHasNoSessionLog) {
  TempDir dir;
  fs::create_directories(dir / "empty");
  EXPECT_THROW((void)load_session(dir / "empty"), SessionError);
}

TEST(ReportReader, AFileThatIsNotASessionLogIsRefused) {
  TempDir dir;
  for (const std::string& first : {std::string("hello\n"), std::string(""),
                                   std::string(R"({"type":"session","format":"other.v9"})"
                                               "\n"),
                                   std::string(R"({"type":"settled","index":0,"time_s":0.0025,"f0_hz":null})"
                                               "\n")}) {
    SCOPED_TRACE(first);
    fs::create_directories(dir / "s");
    write_text(dir / "s" / "session.jsonl", first);
    try {
      (void)load_session(dir / "s");
      ADD_FAILURE() << "no error";
    } catch (const SessionError& e) {
      const std::string what = e.what();
      EXPECT_EQ(what.rfind((dir / "s" / "session.jsonl").string() + ": ", 0), 0u) << what;
      EXPECT_EQ(what.find('\n'), std::string::npos);
    }
  }
}

TEST(ReportCommand, ErrorsAreOneLineNamingThePathWithExitCode1) {
  TempDir dir;
  Result r = run_report(dir, quoted((dir / "missing").string()));
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_EQ(r.err, "pitchwire report: " + (dir / "missing").string() + ": no such folder\n");

  fs::create_directories(dir / "empty");
  r = run_report(dir, quoted((dir / "empty").string()));
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_EQ(r.err, "pitchwire report: " + (dir / "empty").string() + ": no session.jsonl (not a session folder)\n");
  EXPECT_FALSE(fs::exists(dir / "empty" / "report.html"));

  fs::create_directories(dir / "other");
  write_text(dir / "other" / "session.jsonl", "time_s,f0_hz\n");
  r = run_report(dir, quoted((dir / "other").string()));
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_EQ(r.err.rfind(
                "pitchwire report: " + (dir / "other" / "session.jsonl").string() + ": not a pitchwire session log", 0),
            0u)
      << r.err;
  EXPECT_EQ(std::count(r.err.begin(), r.err.end(), '\n'), 1);

  // An output that cannot be written: the folder does not exist.
  write_standard_session(dir / "s");
  r = run_report(dir, quoted((dir / "s").string()) + " -o " + quoted((dir / "no" / "r.html").string()));
  EXPECT_EQ(r.exit_code, 1);
  EXPECT_EQ(r.err.rfind("pitchwire report: " + (dir / "no" / "r.html").string() + ": cannot write: ", 0), 0u) << r.err;
}

// ---- the file -----------------------------------------------------------------------------------------------

TEST(ReportCommand, WritesReportHtmlInTheFolderWithMode0600AndReplacesAnOldOne) {
  TempDir dir;
  write_standard_session(dir / "s");
  write_text(dir / "s" / "report.html", "old");
  ::chmod((dir / "s" / "report.html").c_str(), 0644);
  const Result r = run_report(dir, quoted((dir / "s").string()));
  ASSERT_EQ(r.exit_code, 0) << r.err;
  EXPECT_EQ(r.err, "");
  struct stat st {};
  ASSERT_EQ(::stat((dir / "s" / "report.html").c_str(), &st), 0);
  EXPECT_EQ(st.st_mode & 07777, 0600u);
  const std::string html = read_file(dir / "s" / "report.html");
  EXPECT_EQ(html.rfind("<!DOCTYPE html>", 0), 0u);
  EXPECT_FALSE(fs::exists(dir / "s" / "report.html.tmp"));

  // The folder named with a trailing slash: the same folder.
  const Result slash = run_report(dir, quoted((dir / "s").string() + "/"));
  ASSERT_EQ(slash.exit_code, 0) << slash.err;
  EXPECT_NE(read_file(dir / "s" / "report.html").find("<title>pitchwire session s</title>"), std::string::npos);

  // -o elsewhere, also 0600 whatever the umask.
  const Result o =
      run_report(dir, quoted((dir / "s").string()) + " -o " + quoted((dir / "out.html").string()), "umask 000; ");
  ASSERT_EQ(o.exit_code, 0) << o.err;
  ASSERT_EQ(::stat((dir / "out.html").c_str(), &st), 0);
  EXPECT_EQ(st.st_mode & 07777, 0600u);
}

TEST(ReportPage, IsSelfContainedWithoutScriptOrOutsideResources) {
  TempDir dir;
  write_standard_session(dir / "s");
  const std::string html = render_html(load_session(dir / "s"));
  EXPECT_EQ(html.find("<script"), std::string::npos);
  EXPECT_EQ(html.find("http://"), std::string::npos);
  EXPECT_EQ(html.find("https://"), std::string::npos);
  EXPECT_EQ(html.find("<link"), std::string::npos);
  EXPECT_EQ(html.find("<img"), std::string::npos);
  EXPECT_EQ(html.find("@import"), std::string::npos);
  EXPECT_EQ(html.find("url(http"), std::string::npos);
  // The cautions (docs/sessions.md, "Caution").
  EXPECT_NE(html.find("not a medical device and makes no diagnosis"), std::string::npos);
  EXPECT_NE(html.find("licensed clinician or a qualified coach; stop on pain, strain or hoarseness"),
            std::string::npos);
  EXPECT_NE(html.find("health data"), std::string::npos);
}

// ---- content ------------------------------------------------------------------------------------------------

// The session line names the input audio when it was kept (with the speaker's consent, docs/sessions.md
// "Audio"); the page says whether it was.
TEST(ReportPage, SaysWhetherTheInputAudioWasKept) {
  TempDir dir;
  write_standard_session(dir / "s");
  EXPECT_NE(render_html(load_session(dir / "s")).find("Input audio</dt><dd>not kept"), std::string::npos);
  LogWriter log(json{{"audio_file", "audio.wav"}, {"sample_rate_hz", 16000.0}});
  log.frames(0.0, 1.0, [](double) { return 200.0; });
  log.write(dir / "a");
  const SessionRecord record = load_session(dir / "a");
  EXPECT_EQ(record.audio_file, "audio.wav");
  EXPECT_NE(render_html(record).find("audio.wav <span class=\"note\">kept with the speaker's consent"), std::string::npos);
}

TEST(ReportReader, ATornLastLineIsSkippedCountedAndSaid) {
  TempDir dir;
  LogWriter log;
  log.frames(0.0, 1.0, [](double) { return 200.0; });
  log.raw(R"({"type":"settled","index":200,"time_s":1.0025,"f0_h)");  // cut short, no newline
  log.write(dir / "s");
  const SessionRecord r = load_session(dir / "s");
  EXPECT_EQ(r.frames, 200);
  EXPECT_EQ(r.unreadable_lines, 1);
  EXPECT_EQ(r.lines, 202);
  EXPECT_FALSE(r.summary);
  const std::string html = render_html(r);
  EXPECT_NE(html.find("1 line of session.jsonl could not be read and was skipped"), std::string::npos);
  EXPECT_NE(html.find("not closed"), std::string::npos);

  // A torn line in the middle (a full disk), of an event: counted too.
  LogWriter mid;
  mid.frames(0.0, 0.5, [](double) { return 200.0; });
  mid.raw(R"({"type":"event","wall":"2026-12-02T10:15:01.000Z","kind":"mar)"
          "\n");
  mid.frames(0.5, 1.0, [](double) { return 200.0; });
  mid.write(dir / "m");
  const SessionRecord rm = load_session(dir / "m");
  EXPECT_EQ(rm.frames, 200);
  EXPECT_EQ(rm.unreadable_lines, 1);
}

TEST(ReportPage, HostileStringsFromTheRecordAreShownAsText) {
  TempDir dir;
  const std::string hostile = "<script>alert(1)</script>";
  write_standard_session(dir / "s", hostile);
  // A preset and label with markup, and marker data that tries to close the code element.
  json x = exercise_file();
  x["preset"] = "<b>bold</b>";
  x["label"] = "a\"b'c&d";
  write_text(dir / "s" / "exercise-01-sustained_vowel.json", x.dump());
  const SessionRecord r = load_session(dir / "s");
  ASSERT_EQ(r.markers.size(), 2u);
  EXPECT_EQ(r.markers[0].label, hostile);
  const std::string html = render_html(r);
  EXPECT_EQ(html.find("<script"), std::string::npos);
  EXPECT_EQ(html.find("<b>bold"), std::string::npos);
  EXPECT_NE(html.find("&lt;script&gt;alert(1)&lt;/script&gt;"), std::string::npos);
  EXPECT_NE(html.find("&lt;b&gt;bold&lt;/b&gt;"), std::string::npos);
  EXPECT_NE(html.find("a&quot;b&#39;c&amp;d"), std::string::npos);
  EXPECT_EQ(escape_html("<a href=\"x\">&'"), "&lt;a href=&quot;x&quot;&gt;&amp;&#39;");
  EXPECT_EQ(escape_html(std::string("a\x01z", 3)), "a\xEF\xBF\xBDz");
}

TEST(ReportPage, ExerciseRowHoldsTheValuesOfItsFile) {
  TempDir dir;
  write_standard_session(dir / "s");
  const SessionRecord r = load_session(dir / "s");
  ASSERT_EQ(r.exercises.size(), 1u);
  const auto& x = r.exercises[0];
  const json file = exercise_file();
  EXPECT_EQ(x.file, "exercise-01-sustained_vowel.json");
  EXPECT_EQ(x.preset, file["preset"]);
  EXPECT_EQ(x.label, file["label"]);
  EXPECT_EQ(x.started_s, file["started_s"].get<double>());
  ASSERT_TRUE(x.ended_s);
  EXPECT_EQ(*x.ended_s, file["ended_s"].get<double>());
  EXPECT_EQ(x.by, file["by"]);
  EXPECT_EQ(x.summary, file["summary"]);
  ASSERT_EQ(x.bands.size(), 1u);
  EXPECT_EQ(x.bands[0].name, "target");
  EXPECT_EQ(x.bands[0].inside_fraction, 0.5);
  // Time inside from the log: 196 Hz frames from 0.5 to 2.0 s are inside 180-220 Hz, 247 Hz ones are not.
  EXPECT_NEAR(x.bands[0].inside_s, 1.5, kHop + 1e-9);

  const std::string html = render_html(r);
  const json& s = file["summary"];
  auto three = [](double v) {
    char buf[32];
    std::snprintf(buf, sizeof buf, "%.3f", v);
    return std::string(buf);
  };
  EXPECT_EQ(cell(html, "preset"), "sustained_vowel");
  EXPECT_EQ(cell(html, "label"), "Vowel /a/");
  EXPECT_EQ(cell(html, "started_s"), three(file["started_s"]));
  EXPECT_EQ(cell(html, "ended_s"), three(file["ended_s"]));
  EXPECT_EQ(cell(html, "by"), "supervisor");
  EXPECT_EQ(cell(html, "voiced_s"), three(s["voiced_s"]));
  EXPECT_EQ(cell(html, "f0_p50_hz"), three(s["f0_p50_hz"]) + " Hz");
  EXPECT_EQ(cell(html, "f0_range_st"), three(s["f0_range_st"]));
  EXPECT_EQ(cell(html, "f0_sd_st"), three(s["f0_sd_st"]));
  EXPECT_EQ(cell(html, "cycle_dose"), "661.5");
  EXPECT_NE(html.find("<b>target</b>: 50.0 %, 1.50 s"), std::string::npos);
  EXPECT_NE(html.find("196.123 Hz<br>G3 +1 ct"), std::string::npos);  // 1200·log2(196.123 / 195.998) = 1.1 cents
}

TEST(ReportPage, AnExerciseThatNeverEndedIsShownAsNotEnded) {
  TempDir dir;
  LogWriter log;
  log.frames(0.0, 1.0, [](double) { return 200.0; });
  log.event(1.0, "exercise_started", {{"preset", "pitch_glide"}, {"label", "Glide"}, {"started_s", 1.0}}, "supervisor");
  log.frames(1.0, 2.0, [](double) { return 200.0; });
  log.write(dir / "s");
  const SessionRecord r = load_session(dir / "s");
  ASSERT_EQ(r.exercises.size(), 1u);
  EXPECT_FALSE(r.exercises[0].ended_s);
  EXPECT_EQ(r.exercises[0].preset, "pitch_glide");
  const std::string html = render_html(r);
  EXPECT_EQ(cell(html, "ended_s"), "");  // the cell holds <b>not ended</b>
  EXPECT_NE(html.find("data-field=\"ended_s\"><b>not ended</b>"), std::string::npos);
  EXPECT_NE(html.find("pitch_glide (not ended)"), std::string::npos);
}

TEST(ReportReader, BandSpansFollowBandChangedEvents) {
  TempDir dir;
  LogWriter log;
  log.event(0.0, "band_changed", band_changed("target", {{"target", 180.0, 220.0}}), "supervisor");
  log.frames(0.0, 1.0, [](double) { return 200.0; });
  log.event(1.0, "band_changed", band_changed("high", {{"target", 180.0, 220.0}, {"high", 300.0, 330.0}}),
            "supervisor");
  log.frames(1.0, 2.0, [](double) { return 200.0; });
  log.event(2.0, "band_changed", band_changed("target", {{"high", 300.0, 330.0}, {"target", 190.0, 210.0}}),
            "supervisor");
  log.frames(2.0, 3.0, [](double) { return 200.0; });
  log.event(3.0, "band_changed", band_changed("high", {{"target", 190.0, 210.0}}), "supervisor");
  log.frames(3.0, 4.0, [](double) { return 200.0; });
  log.write(dir / "s");
  const SessionRecord r = load_session(dir / "s");
  ASSERT_EQ(r.bands.size(), 3u);
  EXPECT_EQ(r.bands[0].band.name, "target");
  EXPECT_EQ(r.bands[0].from_s, 0.0);
  EXPECT_EQ(r.bands[0].to_s, 2.0);  // its limits changed at 2 s
  EXPECT_EQ(r.bands[1].band.name, "high");
  EXPECT_EQ(r.bands[1].from_s, 1.0);
  EXPECT_EQ(r.bands[1].to_s, 3.0);  // cleared
  EXPECT_EQ(r.bands[2].band.low_hz, 190.0);
  EXPECT_EQ(r.bands[2].from_s, 2.0);
  EXPECT_TRUE(r.bands[2].open_at_end);
  EXPECT_NEAR(r.bands[2].to_s, 3.9975, 1e-9);  // the last frame
  const std::string html = render_html(r);
  EXPECT_NE(html.find("band high cleared; active: target"), std::string::npos);
}

TEST(ReportPage, TheContourIsBrokenAtAnUnvoicedStretch) {
  TempDir dir;
  write_standard_session(dir / "s");
  const SessionRecord r = load_session(dir / "s");
  ASSERT_EQ(r.bucket_frames, 1u);  // 900 frames: every frame is a point
  ASSERT_EQ(r.contour.size(), 900u);
  for (const auto& p : r.contour) {
    SCOPED_TRACE(p.time_s);
    EXPECT_EQ(p.semitone.has_value(), p.time_s < 2.0 || p.time_s > 2.5);
    if (p.semitone) {
      EXPECT_NEAR(*p.semitone, p.time_s < 2.0 ? 55.0 : 59.0, 0.02);  // G3 = MIDI 55, B3 = 59
    }
  }
  const std::string html = render_html(r);
  const auto [xa, xb] = svg_mapping(html, "data-x");
  const auto runs = subpaths(html);
  ASSERT_EQ(runs.size(), 2u);
  const double gap_from = xa + xb * 2.0, gap_to = xa + xb * 2.5;
  for (const auto& run : runs) {
    for (std::size_t i = 1; i < run.size(); ++i) {
      EXPECT_FALSE(run[i - 1].first <= gap_from + 0.5 && run[i].first >= gap_to - 0.5)
          << "a segment bridges the gap: " << run[i - 1].first << " -> " << run[i].first;
    }
  }
  EXPECT_LT(runs[0].back().first, gap_from + 1.0);
  EXPECT_GT(runs[1].front().first, gap_to - 1.0);
  EXPECT_NE(html.find("data-runs=\"2\""), std::string::npos);
}

TEST(ReportReader, LongSessionsAreReducedToBucketMedians) {
  TempDir dir;
  // 100 000 frames (500 s): per 25 frames (the bucket for 4000 points), the first 13 voiced (a voiced
  // bucket, at least half) or, every 10th bucket, only 12 (an unvoiced bucket). F0 rises by 1 Hz per frame
  // within a bucket, so the bucket's median is its 7th voiced frame (13 frames) .
  LogWriter log;
  log.frames(0.0, 500.0, [](double t) {
    const auto k = static_cast<long>(std::floor(t / kHop));
    const long bucket = k / 25, in = k % 25;
    const long voiced = bucket % 10 == 9 ? 12 : 13;
    return in < voiced ? 150.0 + static_cast<double>(in) : 0.0;
  });
  log.write(dir / "s");
  const SessionRecord r = load_session(dir / "s", 4000);
  EXPECT_EQ(r.frames, 100000);
  EXPECT_EQ(r.bucket_frames, 25u);
  ASSERT_EQ(r.contour.size(), 4000u);
  for (std::size_t b = 0; b < r.contour.size(); ++b) {
    SCOPED_TRACE(b);
    const auto& p = r.contour[b];
    EXPECT_NEAR(p.time_s, (static_cast<double>(b) * 25 + 12.5) * kHop, 1e-3);
    if (b % 10 == 9) {
      EXPECT_FALSE(p.semitone);
    } else {
      ASSERT_TRUE(p.semitone);
      EXPECT_NEAR(*p.semitone, 69.0 + 12.0 * std::log2(156.0 / 440.0), 1e-3);
    }
    if (b > 50) break;
  }
  // The page keeps the points (no more than 4000) and the breaks.
  const std::string html = render_html(r);
  EXPECT_NE(html.find("data-points=\"4000\""), std::string::npos);
  EXPECT_NE(html.find("data-runs=\"400\""), std::string::npos);
}

TEST(ReportReader, LinesLostBetweenFramesBreakTheContour) {
  TempDir dir;
  LogWriter log;
  log.frames(0.0, 1.0, [](double) { return 200.0; });
  log.raw(R"({"type":"gap","wall":"2026-12-02T10:15:02.000Z","lines_lost":200})"
          "\n");
  log.frames(2.0, 3.0, [](double) { return 200.0; });  // the frames of 1..2 s were lost
  log.write(dir / "s");
  const SessionRecord r = load_session(dir / "s");
  ASSERT_EQ(r.problems.size(), 1u);
  EXPECT_EQ(r.problems[0].kind, "gap");
  EXPECT_NE(r.problems[0].text.find("200 lines"), std::string::npos);
  EXPECT_EQ(r.frames, 400);
  const std::string html = render_html(r);
  const auto runs = subpaths(html);
  ASSERT_EQ(runs.size(), 2u);
  const auto [xa, xb] = svg_mapping(html, "data-x");
  EXPECT_LT(runs[0].back().first, xa + xb * 1.0 + 0.5);
  EXPECT_GT(runs[1].front().first, xa + xb * 2.0 - 0.5);
}

TEST(ReportPage, SummaryFromSummaryJsonOrComputedTheSameWay) {
  TempDir dir;
  LogWriter log;
  log.frames(0.0, 2.0, [](double t) { return t < 1.0 ? 200.0 : 0.0; });
  log.write(dir / "s");
  SessionRecord r = load_session(dir / "s");
  EXPECT_EQ(r.voiced_frames, 200);
  // summary.json's method: the centre of the 10-cent bin from 20 Hz, within 5 cents of 200 Hz.
  ASSERT_TRUE(r.p50_hz);
  EXPECT_LT(std::abs(1200.0 * std::log2(*r.p50_hz / 200.0)), 5.0 + 0.1);
  std::string html = render_html(r);
  EXPECT_NE(html.find("there is no summary.json"), std::string::npos);
  EXPECT_NE(html.find("1.000 s (50.1 % of 2.0 s)"), std::string::npos);  // duration: the last frame, 1.9975 s

  write_text(dir / "s" / "summary.json", json{{"format", "pitchwire.session.v1"},
                                              {"closed", "recovered"},
                                              {"started_wall", "2026-12-02T10:15:00.000Z"},
                                              {"ended_wall", "2026-12-02T10:15:02.000Z"},
                                              {"duration_s", 2.0},
                                              {"frames", 400},
                                              {"voiced_s", 1.0},
                                              {"f0_p5_hz", 199.5},
                                              {"f0_p50_hz", 200.1},
                                              {"f0_p95_hz", 200.6},
                                              {"f0_range_st", 0.1},
                                              {"markers", 0},
                                              {"exercises", 0},
                                              {"recording_problems", 0}}
                                             .dump(2));
  r = load_session(dir / "s");
  ASSERT_TRUE(r.summary);
  html = render_html(r);
  EXPECT_NE(html.find("recovered"), std::string::npos);
  EXPECT_NE(html.find("From summary.json."), std::string::npos);
  EXPECT_NE(html.find("200.1 Hz (G3 +"), std::string::npos);
  EXPECT_NE(html.find("0.10 semitones"), std::string::npos);
}

TEST(ReportPage, HistogramSharesAddUpOverTheVoicedFrames) {
  TempDir dir;
  write_standard_session(dir / "s");
  const SessionRecord r = load_session(dir / "s");
  // 400 frames at G3 (0..2 s), 400 at B3 (2.5..4.5 s).
  ASSERT_EQ(r.histogram.size(), 2u);
  EXPECT_EQ(r.histogram.at(55), 400);
  EXPECT_EQ(r.histogram.at(59), 400);
  const std::string html = render_html(r);
  EXPECT_NE(html.find("data-note=\"G3\" data-share=\"0.500000\""), std::string::npos);
  EXPECT_NE(html.find("data-note=\"A3\" data-share=\"0.000000\""), std::string::npos);
  EXPECT_NE(html.find("C4 261.6 Hz"), std::string::npos);  // the C grid line of the contour
}

}  // namespace
