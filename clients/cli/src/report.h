// report.h: `pitchwire report SESSION_DIR`: one self-contained HTML file (inline CSS and SVG, no script, no
// outside resource) describing a recorded session (docs/sessions.md, "Report").
//
// Two parts, each testable on its own: load_session() reads a session folder into a SessionRecord (streaming
// session.jsonl line by line, twice: memory stays flat whatever the session's length), and render_html() turns
// a SessionRecord into the page. run_report() ties them together and writes the file (mode 0600, through a
// temporary file and a rename).
//
// Thread contract: one thread; no shared state.
#pragma once

#include <cstddef>
#include <cstdint>
#include <filesystem>
#include <map>
#include <nlohmann/json.hpp>
#include <optional>
#include <stdexcept>
#include <string>
#include <vector>

namespace pitchwire::cli {

struct ReportOptions {
  std::string session_dir;
  std::string out_path;           // empty: report.html in the session folder
  std::size_t max_points = 4000;  // most points of the contour
};

// Exit codes: 0 written, 1 the session could not be read or the report not written (one line on stderr:
// `pitchwire report: PATH: problem`).
int run_report(const ReportOptions& options);

namespace report {

// A session folder that cannot be reported on: what() is "PATH: problem".
class SessionError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

struct Band {
  std::string name;
  double low_hz = 0.0;
  double high_hz = 0.0;
};

// A band as it was active from from_s to to_s (audio clock); open_at_end: still set when the log ends.
struct BandSpan {
  Band band;
  double from_s = 0.0;
  double to_s = 0.0;
  bool open_at_end = false;
};

// One point of the decimated contour: a bucket of consecutive settled frames. semitone is the MIDI note
// number scale (69 + 12·log2(f/440)); empty for an unvoiced bucket (a gap in the line).
struct ContourPoint {
  double time_s = 0.0;
  std::optional<double> semitone;
};

struct Marker {
  double time_s = 0.0;
  std::optional<std::int64_t> sample;
  std::string wall;  // payload.wall: when the daemon received the mark
  std::string id;
  std::string label;
  std::string by;
  std::string data;  // compact JSON of payload.data, empty without
};

struct BandTime {
  std::string name;
  std::optional<double> inside_fraction;  // from the exercise's summary
  double inside_s = 0.0;                  // from the log's frames: voiced frames inside while active × hop
};

struct Exercise {
  std::string file;  // exercise-NN-PRESET.json, empty when known from the log only
  std::string preset;
  std::string label;
  double started_s = 0.0;
  std::optional<double> ended_s;  // empty: not ended
  std::string ended_wall;
  std::string by;          // who ended it (or, when not ended, who started it)
  nlohmann::json summary;  // the exercise's summary, null when not ended
  std::vector<BandTime> bands;
};

// Something that happened: recording problems, gaps, device events (problems) or changes of bands and
// reference and other events (changes).
struct Happening {
  std::optional<double> time_s;
  std::string wall;
  std::string kind;
  std::string by;
  std::string text;
};

struct SessionRecord {
  std::filesystem::path folder;
  std::string started_wall;
  std::string source;
  double hop_ms = 5.0;
  std::optional<std::int64_t> pid;
  std::string audio_file;  // the session line's audio_file: the input audio kept with consent, or empty

  // summary.json: parsed (an object), or absent; summary_problem says why it is absent when it exists.
  std::optional<nlohmann::json> summary;
  std::string summary_problem;

  std::int64_t lines = 0;             // lines of session.jsonl
  std::int64_t unreadable_lines = 0;  // lines that are not JSON objects (a line cut short), skipped
  std::int64_t frames = 0;            // settled frames
  std::int64_t voiced_frames = 0;
  double first_time_s = 0.0;
  double end_time_s = 0.0;  // the last frame or event on the audio clock

  std::size_t bucket_frames = 1;  // frames per contour point
  std::vector<ContourPoint> contour;
  std::map<int, std::int64_t> histogram;  // nearest MIDI note -> voiced frames

  // Percentiles of the voiced F0 as summary.json computes them (10-cent bins, nearest rank), for a session
  // without summary.json.
  std::optional<double> p5_hz, p50_hz, p95_hz;

  std::vector<BandSpan> bands;
  std::vector<Marker> markers;
  std::vector<Exercise> exercises;
  std::vector<Happening> problems;
  std::vector<Happening> changes;
  std::map<std::string, std::int64_t> band_crossings;  // per band name
};

// Reads a session folder. Throws SessionError for a missing folder, a missing or empty session.jsonl, or a
// first line that is not a `session` line of format pitchwire.session.v1. max_points bounds the contour.
[[nodiscard]] SessionRecord load_session(const std::filesystem::path& folder, std::size_t max_points = 4000);

// The page. generated_by names the program in the footer.
[[nodiscard]] std::string render_html(const SessionRecord& record, const std::string& generated_by = "pitchwire");

// Text for HTML text and attribute values: & < > " ' as entities, control characters as U+FFFD.
[[nodiscard]] std::string escape_html(std::string_view text);

}  // namespace report
}  // namespace pitchwire::cli
