// report.cpp: see report.h. The reader (load_session) first, then the page (render_html), then run_report.
#include "report.h"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <charconv>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <ctime>
#include <fstream>
#include <limits>
#include <string_view>
#include <utility>

#include "pitchwire/dsp/units.h"

#ifndef PITCHWIRE_VERSION
#define PITCHWIRE_VERSION "unknown"
#endif

namespace pitchwire::cli {
namespace fs = std::filesystem;
using nlohmann::json;

namespace report {
namespace {

constexpr std::string_view kFormat = "pitchwire.session.v1";
// What the recorder writes first on every settled line (daemon/src/recorder.cpp, record_settled): the fast
// reader below takes lines that start so; any other line is read as JSON.
constexpr std::string_view kSettledPrefix = R"({"type":"settled",)";
constexpr double kInf = std::numeric_limits<double>::infinity();

// The summary's percentiles (daemon/src/recorder.cpp, SessionSummary): 10-cent bins from 20 Hz, the centre
// of the bin holding the frame of rank ceil(p * n).
constexpr double kHistLowHz = 20.0;
constexpr double kHistBinCents = 10.0;
constexpr std::size_t kHistBins = 1000;

double midi_of(double f_hz) { return dsp::midi_from_hz(f_hz); }

// ---- JSON access without exceptions -----------------------------------------------------------------------

std::string text_of(const json& j, const char* key) {
  if (!j.is_object()) return {};
  const auto it = j.find(key);
  return it != j.end() && it->is_string() ? it->get<std::string>() : std::string();
}

std::optional<double> number_of(const json& j, const char* key) {
  if (!j.is_object()) return std::nullopt;
  const auto it = j.find(key);
  if (it == j.end() || !it->is_number()) return std::nullopt;
  const double v = it->get<double>();
  return std::isfinite(v) ? std::optional<double>(v) : std::nullopt;
}

const json& member(const json& j, const char* key) {
  static const json kNull;
  if (!j.is_object()) return kNull;
  const auto it = j.find(key);
  return it != j.end() ? *it : kNull;
}

std::string compact(const json& j) { return j.dump(-1, ' ', false, json::error_handler_t::replace); }

// ---- the fast path for settled lines -----------------------------------------------------------------------

// Reads `"key":` followed by a number or null at p; moves p past it.
bool take_number(std::string_view line, std::size_t& p, std::string_view key, std::optional<double>& value) {
  if (line.compare(p, key.size(), key) != 0) return false;
  p += key.size();
  if (line.compare(p, 4, "null") == 0) {
    p += 4;
    value.reset();
    return true;
  }
  double v = 0.0;
  const auto [end, ec] = std::from_chars(line.data() + p, line.data() + line.size(), v);
  if (ec != std::errc()) return false;
  p = static_cast<std::size_t>(end - line.data());
  value = v;
  return true;
}

struct Frame {
  double time_s = 0.0;
  std::optional<double> f0_hz;
};

// A settled line as the recorder writes it: {"type":"settled","index":N,"time_s":T,"f0_hz":F|null,...}. A
// line cut short has no closing brace. Returns false for anything else (then read as JSON).
bool parse_settled_fast(std::string_view line, Frame& frame) {
  if (line.size() < kSettledPrefix.size() + 2 || line.back() != '}') return false;
  std::size_t p = kSettledPrefix.size();
  std::optional<double> index, time, f0;
  if (!take_number(line, p, R"("index":)", index) || !index || line[p] != ',') return false;
  ++p;
  if (!take_number(line, p, R"("time_s":)", time) || !time || line[p] != ',') return false;
  ++p;
  if (!take_number(line, p, R"("f0_hz":)", f0) || (line[p] != ',' && line[p] != '}')) return false;
  frame.time_s = *time;
  frame.f0_hz = f0;
  return true;
}

// ---- pass 1: everything but the frames --------------------------------------------------------------------

struct LogExercise {
  Exercise exercise;
  bool matched = false;
};

class EventReader {
 public:
  explicit EventReader(SessionRecord& r) : r_(r) {}

  void on_line(const json& j) {
    const std::string type = text_of(j, "type");
    if (type == "stats") {
      if (const auto t = number_of(j, "time_s")) seen(*t);
    } else if (type == "gap") {
      const auto lost = number_of(j, "lines_lost");
      r_.problems.push_back({std::nullopt, text_of(j, "wall"), "gap", "",
                             (lost ? std::to_string(static_cast<std::int64_t>(*lost)) : std::string("some")) +
                                 " lines of the record were lost (the disk could not be written)"});
    } else if (type == "event") {
      on_event(j);
    }
  }

  // After the last line: the spans and exercises still open.
  std::vector<LogExercise> finish() {
    for (auto& [name, index] : open_) r_.bands[index].open_at_end = true;
    open_.clear();
    return std::move(exercises_);
  }

  [[nodiscard]] double last_time() const { return last_time_; }

 private:
  void seen(double t) { last_time_ = std::max(last_time_, t); }

  void on_event(const json& j) {
    const std::string kind = text_of(j, "kind");
    const auto time = number_of(j, "time_s");
    const double t = time.value_or(last_time_);
    if (time) seen(*time);
    const json& payload = member(j, "payload");
    const std::string by = text_of(j, "by");
    const std::string wall = text_of(j, "wall");
    if (kind == "band_changed") {
      band_changed(t, payload, by, wall);
    } else if (kind == "band_crossing") {
      ++r_.band_crossings[text_of(payload, "name")];
    } else if (kind == "marker") {
      Marker m;
      m.time_s = t;
      if (const auto s = number_of(payload, "sample")) m.sample = static_cast<std::int64_t>(std::llround(*s));
      m.wall = text_of(payload, "wall");
      if (m.wall.empty()) m.wall = wall;
      m.id = text_of(payload, "id");
      m.label = text_of(payload, "label");
      m.by = by;
      if (const json& data = member(payload, "data"); !data.is_null()) m.data = compact(data);
      r_.markers.push_back(std::move(m));
    } else if (kind == "exercise_started") {
      LogExercise x;
      x.exercise.preset = text_of(payload, "preset");
      x.exercise.label = text_of(payload, "label");
      x.exercise.started_s = number_of(payload, "started_s").value_or(t);
      x.exercise.by = by;
      exercises_.push_back(std::move(x));
    } else if (kind == "exercise_ended") {
      const double started = number_of(payload, "started_s").value_or(t);
      LogExercise* open = nullptr;
      for (auto& x : exercises_) {
        if (!x.exercise.ended_s && std::abs(x.exercise.started_s - started) < 1e-6) open = &x;
      }
      if (!open) {  // its start was lost: known from the end
        exercises_.emplace_back();
        open = &exercises_.back();
        open->exercise.started_s = started;
      }
      Exercise& x = open->exercise;
      x.preset = text_of(payload, "preset");
      x.label = text_of(payload, "label");
      x.ended_s = t;
      x.ended_wall = wall;
      x.by = by;
      x.summary = member(payload, "summary");
    } else if (kind == "reference_changed") {
      const auto ref = number_of(payload, "reference_hz");
      std::string text = "reference pitch";
      if (ref) {
        const auto note = dsp::nearest_note(*ref);
        std::array<char, 64> buf{};
        std::snprintf(buf.data(), buf.size(), " %.2f Hz (%s)", *ref, note.name.c_str());
        text += buf.data();
      }
      r_.changes.push_back({t, wall, kind, by, text});
    } else if (kind == "recording_problem") {
      const bool resolved = member(payload, "resolved").is_boolean() && member(payload, "resolved").get<bool>();
      r_.problems.push_back({t, wall, kind, by, (resolved ? "resolved: " : "") + text_of(payload, "message")});
    } else if (kind == "overflow") {
      const auto lost = number_of(payload, "samples_lost");
      r_.problems.push_back({t, wall, kind, by,
                             (lost ? std::to_string(static_cast<std::int64_t>(*lost)) : std::string("some")) +
                                 " input samples lost: the analysis did not keep up"});
    } else if (kind == "device_lost") {
      r_.problems.push_back({t, wall, kind, by, text_of(payload, "device") + ": " + text_of(payload, "reason")});
    } else if (kind == "device_back") {
      r_.problems.push_back({t, wall, kind, by, text_of(payload, "device") + " is back"});
    } else if (kind == "dropped_frames") {
      const auto n = number_of(payload, "count");
      r_.problems.push_back({t, wall, kind, by,
                             (n ? std::to_string(static_cast<std::int64_t>(*n)) : std::string("some")) +
                                 " frames dropped for a slow connection"});
    } else if (!kind.empty()) {
      r_.changes.push_back({t, wall, kind, by, compact(payload)});
    }
  }

  void band_changed(double t, const json& payload, const std::string& by, const std::string& wall) {
    std::vector<Band> now;
    for (const json& b : member(payload, "bands")) {
      const auto low = number_of(b, "low_hz"), high = number_of(b, "high_hz");
      if (low && high) now.push_back({text_of(b, "name"), *low, *high});
    }
    // Close what went or changed, open what came.
    for (auto it = open_.begin(); it != open_.end();) {
      const Band& was = r_.bands[it->second].band;
      const bool kept = std::any_of(now.begin(), now.end(), [&](const Band& b) {
        return b.name == was.name && b.low_hz == was.low_hz && b.high_hz == was.high_hz;
      });
      if (kept) {
        ++it;
      } else {
        r_.bands[it->second].to_s = t;
        it = open_.erase(it);
      }
    }
    for (const Band& b : now) {
      if (open_.count(b.name)) continue;
      open_[b.name] = r_.bands.size();
      r_.bands.push_back({b, t, kInf, false});
    }
    const std::string name = text_of(payload, "name");
    std::string text;
    const auto set = std::find_if(now.begin(), now.end(), [&](const Band& b) { return b.name == name; });
    if (set != now.end()) {
      std::array<char, 96> buf{};
      std::snprintf(buf.data(), buf.size(), ": %.1f to %.1f Hz", set->low_hz, set->high_hz);
      text = "band " + name + " set" + buf.data();
    } else {
      text = "band " + name + " cleared";
    }
    text += now.empty() ? "; no band active" : "; active: ";
    for (std::size_t i = 0; i < now.size(); ++i) text += (i ? ", " : "") + now[i].name;
    r_.changes.push_back({t, wall, "band_changed", by, text});
  }

  SessionRecord& r_;
  std::map<std::string, std::size_t> open_;  // band name -> index in r_.bands
  std::vector<LogExercise> exercises_;
  double last_time_ = 0.0;
};

// ---- pass 2: the frames ---------------------------------------------------------------------------------

class FrameReader {
 public:
  FrameReader(SessionRecord& r, std::int64_t expected_frames, std::size_t max_points) : r_(r) {
    const auto points = static_cast<std::int64_t>(std::max<std::size_t>(max_points, 1));
    r_.bucket_frames = static_cast<std::size_t>(std::max<std::int64_t>(1, (expected_frames + points - 1) / points));
    bucket_.reserve(r_.bucket_frames);
    cents_.assign(kHistBins, 0);
    hop_s_ = r_.hop_ms / 1000.0;
  }

  void on_frame(const Frame& f) {
    if (r_.frames == 0) r_.first_time_s = f.time_s;
    // Lines lost between two frames (a gap line, a daemon restarted on the same folder): the line breaks.
    if (r_.frames > 0 && f.time_s - last_time_ > 2.5 * hop_s_) {
      emit();
      r_.contour.push_back({0.5 * (last_time_ + f.time_s), std::nullopt});
    }
    ++r_.frames;
    last_time_ = f.time_s;
    r_.end_time_s = std::max(r_.end_time_s, f.time_s);
    if (bucket_n_ == 0) bucket_first_ = f.time_s;
    bucket_last_ = f.time_s;
    ++bucket_n_;
    if (f.f0_hz && *f.f0_hz > 0.0) {
      const double f0 = *f.f0_hz;
      const double m = midi_of(f0);
      ++r_.voiced_frames;
      ++r_.histogram[static_cast<int>(std::lround(m))];
      const double c = 1200.0 * std::log2(f0 / kHistLowHz) / kHistBinCents;
      ++cents_[static_cast<std::size_t>(std::clamp(c, 0.0, static_cast<double>(kHistBins - 1)))];
      bucket_.push_back(m);
      inside_bands(f.time_s, f0);
    }
    if (bucket_n_ >= r_.bucket_frames) emit();
  }

  void finish() {
    emit();
    auto percentile = [&](double p) -> std::optional<double> {
      if (r_.voiced_frames == 0) return std::nullopt;
      const double rank = std::max(1.0, std::ceil(p * static_cast<double>(r_.voiced_frames)));
      double seen = 0;
      for (std::size_t b = 0; b < cents_.size(); ++b) {
        seen += static_cast<double>(cents_[b]);
        if (seen >= rank) {
          const double hz = kHistLowHz * std::exp2((static_cast<double>(b) + 0.5) * kHistBinCents / 1200.0);
          return std::round(hz * 10.0) / 10.0;
        }
      }
      return std::nullopt;
    };
    r_.p5_hz = percentile(0.05);
    r_.p50_hz = percentile(0.5);
    r_.p95_hz = percentile(0.95);
  }

 private:
  // A bucket is voiced when at least half its frames are; its value is the median semitone of those.
  void emit() {
    if (bucket_n_ == 0) return;
    ContourPoint point{0.5 * (bucket_first_ + bucket_last_), std::nullopt};
    if (2 * bucket_.size() >= bucket_n_) {
      const std::size_t mid = bucket_.size() / 2;
      std::nth_element(bucket_.begin(), bucket_.begin() + static_cast<std::ptrdiff_t>(mid), bucket_.end());
      double median = bucket_[mid];
      if (bucket_.size() % 2 == 0) {
        median =
            0.5 * (median + *std::max_element(bucket_.begin(), bucket_.begin() + static_cast<std::ptrdiff_t>(mid)));
      }
      point.semitone = median;
    }
    r_.contour.push_back(point);
    bucket_.clear();
    bucket_n_ = 0;
  }

  // Time inside each band during each exercise: voiced frames inside a band while it was active.
  void inside_bands(double t, double f0) {
    for (Exercise& x : r_.exercises) {
      if (t < x.started_s || t > x.ended_s.value_or(kInf)) continue;
      for (const BandSpan& span : r_.bands) {
        if (t < span.from_s || t >= span.to_s) continue;
        if (f0 < span.band.low_hz || f0 > span.band.high_hz) continue;
        for (BandTime& bt : x.bands) {
          if (bt.name == span.band.name) bt.inside_s += hop_s_;
        }
      }
    }
  }

  SessionRecord& r_;
  double hop_s_ = 0.005;
  std::vector<double> bucket_;
  std::size_t bucket_n_ = 0;
  double bucket_first_ = 0.0, bucket_last_ = 0.0, last_time_ = 0.0;
  std::vector<std::int64_t> cents_;
};

// The exercise files, in the order of their names (exercise-01-…, exercise-02-…).
std::vector<Exercise> read_exercise_files(const fs::path& folder, std::vector<Happening>& problems) {
  std::vector<fs::path> paths;
  std::error_code ec;
  for (const auto& entry : fs::directory_iterator(folder, ec)) {
    const std::string name = entry.path().filename().string();
    if (name.rfind("exercise-", 0) == 0 && entry.path().extension() == ".json") paths.push_back(entry.path());
  }
  std::sort(paths.begin(), paths.end());
  std::vector<Exercise> out;
  for (const fs::path& path : paths) {
    std::ifstream in(path, std::ios::binary);
    const json j = json::parse(in, nullptr, false);
    if (j.is_discarded() || !j.is_object()) {
      problems.push_back({std::nullopt, "", "exercise_file", "", path.filename().string() + " could not be read"});
      continue;
    }
    Exercise x;
    x.file = path.filename().string();
    x.preset = text_of(j, "preset");
    x.label = text_of(j, "label");
    x.started_s = number_of(j, "started_s").value_or(0.0);
    x.ended_s = number_of(j, "ended_s");
    x.ended_wall = text_of(j, "ended_wall");
    x.by = text_of(j, "by");
    x.summary = member(j, "summary");
    out.push_back(std::move(x));
  }
  return out;
}

// One row per exercise: every file, then what the log knows and no file holds (not ended, or a file that
// could not be written), in the order they started.
std::vector<Exercise> merge_exercises(std::vector<Exercise> files, std::vector<LogExercise> logged,
                                      const std::vector<BandSpan>& spans) {
  for (const Exercise& f : files) {
    for (LogExercise& l : logged) {
      if (!l.matched && l.exercise.preset == f.preset && std::abs(l.exercise.started_s - f.started_s) < 1e-6) {
        l.matched = true;
        break;
      }
    }
  }
  for (LogExercise& l : logged) {
    if (!l.matched) files.push_back(std::move(l.exercise));
  }
  std::stable_sort(files.begin(), files.end(),
                   [](const Exercise& a, const Exercise& b) { return a.started_s < b.started_s; });
  // Bands: the summary's, then any other band active during the exercise.
  for (Exercise& x : files) {
    for (const json& b : member(x.summary, "bands")) {
      BandTime bt;
      bt.name = text_of(b, "name");
      bt.inside_fraction = number_of(b, "inside_fraction");
      x.bands.push_back(std::move(bt));
    }
    const double end = x.ended_s.value_or(kInf);
    for (const BandSpan& s : spans) {
      if (s.from_s > end || s.to_s < x.started_s) continue;
      const bool listed =
          std::any_of(x.bands.begin(), x.bands.end(), [&](const BandTime& bt) { return bt.name == s.band.name; });
      if (!listed) x.bands.push_back({s.band.name, std::nullopt, 0.0});
    }
  }
  return files;
}

// The reason of the last failed call, also when the library left errno at 0.
std::string errno_text() { return errno != 0 ? std::strerror(errno) : "read error"; }

std::ifstream open_log(const fs::path& path, std::vector<char>& buffer) {
  std::ifstream in;
  buffer.resize(std::size_t{1} << 20);
  in.rdbuf()->pubsetbuf(buffer.data(), static_cast<std::streamsize>(buffer.size()));
  in.open(path, std::ios::binary);
  return in;
}

}  // namespace

SessionRecord load_session(const fs::path& folder, std::size_t max_points) {
  std::error_code ec;
  if (!fs::exists(folder, ec)) throw SessionError(folder.string() + ": no such folder");
  if (!fs::is_directory(folder, ec)) throw SessionError(folder.string() + ": not a folder");
  const fs::path log = folder / "session.jsonl";
  if (!fs::exists(log, ec)) throw SessionError(folder.string() + ": no session.jsonl (not a session folder)");

  SessionRecord r;
  r.folder = folder.has_filename() ? folder : folder.parent_path();  // "…/20261202T101500Z/" names the folder too
  std::vector<char> buffer;
  std::int64_t settled_lines = 0;
  std::vector<LogExercise> logged;
  {
    std::ifstream in = open_log(log, buffer);
    if (!in) throw SessionError(log.string() + ": cannot read: " + errno_text());
    std::string line;
    if (!std::getline(in, line)) throw SessionError(log.string() + ": empty (not a session log)");
    const json head = json::parse(line, nullptr, false);
    if (head.is_discarded() || text_of(head, "type") != "session" || text_of(head, "format") != kFormat) {
      throw SessionError(log.string() +
                         ": not a pitchwire session log (the first line is not a session line of format " +
                         std::string(kFormat) + ")");
    }
    r.lines = 1;
    r.started_wall = text_of(head, "started_wall");
    r.source = text_of(head, "source");
    r.audio_file = text_of(head, "audio_file");
    if (const auto hop = number_of(head, "hop_ms"); hop && *hop > 0.0) r.hop_ms = *hop;
    if (const auto pid = number_of(head, "pid")) r.pid = static_cast<std::int64_t>(*pid);

    EventReader events(r);
    while (std::getline(in, line)) {
      ++r.lines;
      if (line.compare(0, kSettledPrefix.size(), kSettledPrefix) == 0) {
        ++settled_lines;  // read in the second pass
        continue;
      }
      const json j = json::parse(line, nullptr, false);
      if (j.is_discarded() || !j.is_object()) {
        ++r.unreadable_lines;
        continue;
      }
      events.on_line(j);
    }
    if (in.bad()) throw SessionError(log.string() + ": cannot read: " + errno_text());
    logged = events.finish();
    r.end_time_s = events.last_time();
  }
  r.exercises = merge_exercises(read_exercise_files(folder, r.problems), std::move(logged), r.bands);

  {
    std::ifstream in = open_log(log, buffer);
    if (!in) throw SessionError(log.string() + ": cannot read: " + errno_text());
    FrameReader frames(r, settled_lines, max_points);
    std::string line;
    Frame frame;
    while (std::getline(in, line)) {
      if (line.compare(0, kSettledPrefix.size(), kSettledPrefix) != 0) continue;
      if (parse_settled_fast(line, frame)) {
        frames.on_frame(frame);
        continue;
      }
      const json j = json::parse(line, nullptr, false);
      const auto t = number_of(j, "time_s");
      if (j.is_discarded() || !j.is_object() || !t) {
        ++r.unreadable_lines;
        continue;
      }
      frames.on_frame({*t, number_of(j, "f0_hz")});
    }
    if (in.bad()) throw SessionError(log.string() + ": cannot read: " + errno_text());
    frames.finish();
  }

  const fs::path summary = folder / "summary.json";
  if (fs::exists(summary, ec)) {
    std::ifstream in(summary, std::ios::binary);
    json j = json::parse(in, nullptr, false);
    if (!j.is_discarded() && j.is_object()) {
      r.summary = std::move(j);
    } else {
      r.summary_problem = "summary.json could not be read";
    }
  }
  if (r.summary) {
    if (const auto d = number_of(*r.summary, "duration_s")) r.end_time_s = std::max(r.end_time_s, *d);
  }
  for (BandSpan& s : r.bands) {
    if (s.open_at_end) s.to_s = std::max(s.from_s, r.end_time_s);
  }
  return r;
}

// ---- the page -------------------------------------------------------------------------------------------

std::string escape_html(std::string_view text) {
  std::string out;
  out.reserve(text.size() + 16);
  for (const char c : text) {
    switch (c) {
      case '&':
        out += "&amp;";
        break;
      case '<':
        out += "&lt;";
        break;
      case '>':
        out += "&gt;";
        break;
      case '"':
        out += "&quot;";
        break;
      case '\'':
        out += "&#39;";
        break;
      default:
        if (static_cast<unsigned char>(c) < 0x20 && c != '\t' && c != '\n') {
          out += "\xEF\xBF\xBD";  // U+FFFD
        } else {
          out += c;
        }
    }
  }
  return out;
}

namespace {

// Colours and line styles (our own; every state they mark is also named in text).
constexpr const char* kContourColour = "#6d1f7a";  // plum: the F0 contour and the histogram's bars
constexpr const char* kMarkerColour = "#2f3b47";
struct BandStyle {
  const char* fill;  // drawn at kBandOpacity over the white plot
  const char* edge;
  const char* dash;  // edge line style, so that bands differ without colour
};
constexpr std::array<BandStyle, 4> kBandStyles{{{"#5fae57", "#2e6b28", ""},
                                                {"#e0a526", "#8a5d00", "6 3"},
                                                {"#5b8fd1", "#234f86", "2 3"},
                                                {"#d46a8c", "#8a2347", "8 3 2 3"}}};
constexpr double kBandOpacity = 0.3;

std::string fixed(double v, int decimals) {
  std::array<char, 64> buf{};
  const auto [end, ec] = std::to_chars(buf.data(), buf.data() + buf.size(), v, std::chars_format::fixed, decimals);
  return ec == std::errc() ? std::string(buf.data(), end) : std::string("?");
}

std::string fixed_or_dash(std::optional<double> v, int decimals, const std::string& unit = "") {
  return v ? fixed(*v, decimals) + unit : std::string("–");
}

// The band's fill as it shows over white at kBandOpacity (for the browser test's pixel checks).
std::string on_white(const char* hex, double opacity) {
  unsigned rgb = 0;
  std::from_chars(hex + 1, hex + 7, rgb, 16);
  std::array<char, 8> buf{};
  auto mix = [&](unsigned c) { return static_cast<unsigned>(std::lround(opacity * c + (1.0 - opacity) * 255.0)); };
  std::snprintf(buf.data(), buf.size(), "#%02x%02x%02x", mix((rgb >> 16) & 0xff), mix((rgb >> 8) & 0xff),
                mix(rgb & 0xff));
  return buf.data();
}

std::string note_text(double f_hz) {
  const auto n = dsp::nearest_note(f_hz);
  const long c = std::lround(n.cents_off);
  return n.name + " " + (c > 0 ? "+" : c < 0 ? "−" : "±") + std::to_string(std::labs(c)) + " ct";
}

std::string hz_and_note(std::optional<double> f_hz) {
  if (!f_hz) return "–";
  return fixed(*f_hz, 1) + " Hz (" + note_text(*f_hz) + ")";
}

// "1 h 02 min 03 s", "4 min 05 s", "12.3 s".
std::string duration_text(double s) {
  if (s < 60.0) return fixed(s, 1) + " s";
  const auto total = static_cast<long>(std::lround(s));
  std::array<char, 48> buf{};
  if (total >= 3600) {
    std::snprintf(buf.data(), buf.size(), "%ld h %02ld min %02ld s", total / 3600, total / 60 % 60, total % 60);
  } else {
    std::snprintf(buf.data(), buf.size(), "%ld min %02ld s", total / 60, total % 60);
  }
  return buf.data();
}

// An axis label for time t with tick step `step`.
std::string time_label(double t, double step, double span) {
  if (span < 120.0) return fixed(t, step < 1.0 ? 1 : 0) + " s";
  const auto total = static_cast<long>(std::lround(t));
  std::array<char, 32> buf{};
  if (span >= 3600.0) {
    std::snprintf(buf.data(), buf.size(), "%ld:%02ld:%02ld", total / 3600, total / 60 % 60, total % 60);
  } else {
    std::snprintf(buf.data(), buf.size(), "%ld:%02ld", total / 60, total % 60);
  }
  return buf.data();
}

// A tick step of about span / ticks: 1, 2 or 5 times a power of ten below a minute, whole minutes and hours
// (5, 10, 15, 30 min…) above.
double nice_step(double span, int ticks) {
  const double raw = span / ticks;
  if (raw > 30.0) {
    for (const double m : {60.0, 120.0, 300.0, 600.0, 900.0, 1800.0, 3600.0, 7200.0, 10800.0, 21600.0}) {
      if (raw <= m) return m;
    }
    return 3600.0 * std::ceil(raw / 3600.0);
  }
  const double p = std::pow(10.0, std::floor(std::log10(raw)));
  for (const double m : {1.0, 2.0, 5.0, 10.0}) {
    if (raw <= m * p) return m * p;
  }
  return 10.0 * p;
}

// Shortens to at most n code points (never inside a UTF-8 sequence), with an ellipsis.
std::string shorten(const std::string& s, std::size_t n) {
  std::size_t points = 0;
  for (std::size_t i = 0; i < s.size(); ++i) {
    if ((static_cast<unsigned char>(s[i]) & 0xC0) == 0x80) continue;
    if (points++ == n) return s.substr(0, i) + "…";
  }
  return s;
}

std::string wall_now() {
  const std::time_t t = std::chrono::system_clock::to_time_t(std::chrono::system_clock::now());
  std::tm tm{};
  gmtime_r(&t, &tm);
  std::array<char, 32> buf{};
  std::strftime(buf.data(), buf.size(), "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf.data();
}

constexpr const char* kStyle = R"(
:root { --ink: #1e2328; --muted: #5d6670; --rule: #c9ced4; --paper: #ffffff; --panel: #f5f6f2; --accent: #6d1f7a; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 15px/1.45 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
main { max-width: 1060px; margin: 0 auto; padding: 24px 28px 40px; }
h1 { font-size: 24px; margin: 0 0 4px; letter-spacing: 0.01em; }
h1 small { font-weight: normal; color: var(--muted); font-size: 15px; }
h2 { font-size: 18px; margin: 30px 0 8px; padding-bottom: 3px; border-bottom: 2px solid var(--ink); }
p { margin: 6px 0; }
.facts { display: grid; grid-template-columns: repeat(auto-fill, minmax(230px, 1fr)); gap: 6px 18px;
         margin: 14px 0; padding: 12px 14px; background: var(--panel); border-left: 4px solid var(--accent); }
.facts div { display: flex; flex-direction: column; }
.facts dt { font-size: 12px; text-transform: uppercase; letter-spacing: 0.06em; color: var(--muted); }
.facts dd { margin: 0; font-weight: bold; }
.caution { border: 2px solid var(--ink); padding: 10px 14px; margin: 14px 0; }
.caution strong:first-child { display: block; font-size: 14px; text-transform: uppercase; letter-spacing: 0.08em; }
.caution ul { margin: 4px 0 0 18px; padding: 0; }
.note { color: var(--muted); font-size: 13px; }
.warn { border-left: 4px solid #8a5d00; padding: 4px 10px; background: #fbf4e4; }
svg { display: block; width: 100%; height: auto; max-width: 1000px; }
svg text { font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
.legend { display: flex; flex-wrap: wrap; gap: 4px 18px; font-size: 13px; margin: 6px 0; padding: 0; list-style: none; }
.legend svg { display: inline-block; width: 34px; height: 14px; vertical-align: middle; margin-right: 5px; }
table { border-collapse: collapse; width: 100%; font-size: 13px; margin: 6px 0; }
th, td { text-align: left; padding: 4px 8px 4px 0; border-bottom: 1px solid var(--rule); vertical-align: top; }
th { font-size: 12px; text-transform: uppercase; letter-spacing: 0.04em; color: var(--muted);
     border-bottom: 2px solid var(--rule); }
td.num, th.num { text-align: right; padding-right: 12px; font-variant-numeric: tabular-nums; }
code { font-family: "DejaVu Sans Mono", "Liberation Mono", monospace; font-size: 12px; word-break: break-all; }
dl.measures dt { font-weight: bold; margin-top: 8px; }
dl.measures dd { margin: 0 0 0 18px; }
dl.measures dd span { color: var(--muted); font-size: 13px; display: block; }
footer { margin-top: 36px; padding-top: 8px; border-top: 1px solid var(--rule); font-size: 12px; color: var(--muted); }
@media print {
  main { max-width: none; padding: 0; }
  section, table, svg { break-inside: avoid; }
  h2 { break-after: avoid; }
}
)";

class Page {
 public:
  explicit Page(const SessionRecord& r) : r_(r) {}

  std::string render(const std::string& generated_by) {
    head();
    header();
    caution();
    contour_chart();
    histogram();
    summary();
    exercises();
    markers();
    problems();
    changes();
    out_ += "<footer><p>Written " + wall_now() + " by " + escape_html(generated_by) +
            " from the session folder <code>" + escape_html(r_.folder.string()) +
            "</code>. This file describes a person's voice: it is health data. Keep it private (it was written with "
            "mode 0600), and follow your local rules for health records.</p></footer>\n</main>\n</body>\n</html>\n";
    return std::move(out_);
  }

 private:
  void head() {
    const std::string name = escape_html(r_.folder.filename().string());
    out_ +=
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src 'unsafe-inline'\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        "<meta name=\"robots\" content=\"noindex\">\n<title>pitchwire session " +
        name + "</title>\n<style>" + kStyle + "</style>\n</head>\n<body>\n<main>\n";
  }

  [[nodiscard]] double duration() const {
    if (r_.summary) {
      if (const auto d = number_of(*r_.summary, "duration_s")) return *d;
    }
    return r_.end_time_s;
  }

  void fact(const std::string& term, const std::string& value_html, const std::string& id = "") {
    out_ += "<div" + (id.empty() ? std::string() : " id=\"" + id + "\"") + "><dt>" + term + "</dt><dd>" + value_html +
            "</dd></div>";
  }

  void header() {
    out_ += "<header>\n<h1>Session report <small>" + escape_html(r_.folder.filename().string()) + "</small></h1>\n";
    out_ += "<dl class=\"facts\">";
    fact("Started (UTC)", escape_html(r_.started_wall.empty() ? "unknown" : r_.started_wall), "fact-started");
    fact("Duration", duration_text(duration()) + " <span class=\"note\">audio clock</span>", "fact-duration");
    fact("Source", escape_html(r_.source.empty() ? "unknown" : r_.source), "fact-source");
    std::string closed;
    if (r_.summary) {
      const std::string how = text_of(*r_.summary, "closed");
      closed = escape_html(how.empty() ? "unknown" : how);
      if (how == "stopped") closed += " <span class=\"note\">the daemon was stopped</span>";
      if (how == "recovered") closed += " <span class=\"note\">closed from the log at the next start</span>";
      if (const std::string ended = text_of(*r_.summary, "ended_wall"); !ended.empty()) {
        closed += "<br><span class=\"note\">ended " + escape_html(ended) + "</span>";
      }
    } else {
      closed = "not closed <span class=\"note\">" +
               std::string(r_.summary_problem.empty() ? "no summary.json: the daemon was killed or still runs"
                                                      : r_.summary_problem) +
               "</span>";
    }
    fact("Closed", closed, "fact-closed");
    fact("Frames",
         std::to_string(r_.frames) + " <span class=\"note\">settled, " + fixed(r_.hop_ms, 2) + " ms hop</span>");
    fact("Lines of the log",
         std::to_string(r_.lines) +
             (r_.unreadable_lines > 0
                  ? " <span class=\"note\">" + std::to_string(r_.unreadable_lines) + " unreadable</span>"
                  : std::string()),
         "fact-lines");
    fact("Input audio",
         r_.audio_file.empty() ? std::string("not kept")
                               : escape_html(r_.audio_file) +
                                     " <span class=\"note\">kept with the speaker's consent; health data like "
                                     "this report</span>",
         "fact-audio");
    out_ += "</dl>\n";
    if (r_.unreadable_lines > 0) {
      out_ += "<p class=\"warn\" id=\"unreadable\">" + std::to_string(r_.unreadable_lines) +
              (r_.unreadable_lines == 1 ? " line" : " lines") + " of session.jsonl could not be read and " +
              (r_.unreadable_lines == 1 ? "was" : "were") +
              " skipped (a line cut short, for example when the daemon was killed or the disk was full; "
              "docs/sessions.md, \"What can be lost\").</p>\n";
    }
    out_ += "</header>\n";
  }

  void caution() {
    out_ +=
        "<section class=\"caution\" id=\"caution\"><strong>Caution</strong><ul>"
        "<li>pitchwire is not a medical device and makes no diagnosis.</li>"
        "<li>Exercises are planned and supervised by a licensed clinician or a qualified coach; stop on pain, "
        "strain or hoarseness.</li>"
        "<li>This report is health data: keep it private and follow your local rules for health records.</li>"
        "</ul></section>\n";
  }

  // ---- the contour ----

  void contour_chart() {
    constexpr double kW = 1000, kLeft = 112, kRight = 16, kTop = 30, kPlotH = 360;
    constexpr double kAxisH = 24, kLaneH = 30;
    const double plot_bottom = kTop + kPlotH;
    const double lane_top = plot_bottom + kAxisH;
    const double height = lane_top + kLaneH + 8;
    const double t0 = std::min(0.0, r_.first_time_s);
    const double t1 = std::max({duration(), r_.end_time_s, t0 + 1.0});

    // Semitone range: the voiced frames, widened to at least an octave around them and by the bands when they
    // are near (a band over the whole search range would squeeze the voice into a few pixels).
    double lo = 48.0, hi = 72.0;
    if (!r_.histogram.empty()) {
      lo = r_.histogram.begin()->first - 1.5;
      hi = r_.histogram.rbegin()->first + 1.5;
      for (const BandSpan& s : r_.bands) {
        const double bl = midi_of(s.band.low_hz), bh = midi_of(s.band.high_hz);
        if (bl > lo - 12.0) lo = std::min(lo, bl - 1.0);
        if (bh < hi + 12.0) hi = std::max(hi, bh + 1.0);
      }
    } else if (!r_.bands.empty()) {
      lo = kInf;
      hi = -kInf;
      for (const BandSpan& s : r_.bands) {
        lo = std::min(lo, midi_of(s.band.low_hz) - 1.0);
        hi = std::max(hi, midi_of(s.band.high_hz) + 1.0);
      }
    }
    if (hi - lo < 12.0) {
      const double mid = 0.5 * (lo + hi);
      lo = mid - 6.0;
      hi = mid + 6.0;
    }
    lo = std::floor(lo);
    hi = std::ceil(hi);
    const double xa = kLeft - t0 * (kW - kLeft - kRight) / (t1 - t0), xb = (kW - kLeft - kRight) / (t1 - t0);
    const double yc = plot_bottom + lo * kPlotH / (hi - lo), yd = -kPlotH / (hi - lo);
    auto x_of = [&](double t) { return xa + xb * t; };
    auto y_of = [&](double st) { return yc + yd * st; };

    out_ += "<section id=\"pitch\">\n<h2>Pitch over the session</h2>\n";
    out_ += "<p class=\"note\">Settled F0 (" +
            std::string(r_.bucket_frames > 1 ? "median of each " + std::to_string(r_.bucket_frames) +
                                                   " frames, a point voiced when at "
                                                   "least half its frames are"
                                             : "every frame") +
            ") on a semitone scale (equal temperament, A4 = 440 Hz); time on the audio clock. The line is broken "
            "where the voice was unvoiced; it never bridges a gap.</p>\n";
    out_ += "<svg id=\"contour-chart\" viewBox=\"0 0 " + fixed(kW, 0) + " " + fixed(height, 0) +
            "\" role=\"img\" aria-labelledby=\"contour-title\" data-x=\"" + fixed(xa, 6) + " " + fixed(xb, 6) +
            "\" data-y=\"" + fixed(yc, 6) + " " + fixed(yd, 6) + "\" data-plot=\"" + fixed(kLeft, 0) + " " +
            fixed(kTop, 0) + " " + fixed(kW - kRight, 0) + " " + fixed(plot_bottom, 0) + "\" data-view=\"" +
            fixed(kW, 0) + " " + fixed(height, 0) + "\" data-time=\"" + fixed(t0, 4) + " " + fixed(t1, 4) +
            "\" data-semitones=\"" + fixed(lo, 0) + " " + fixed(hi, 0) + "\" data-points=\"" +
            std::to_string(r_.contour.size()) + "\">\n";
    out_ += "<title id=\"contour-title\">F0 contour in semitones over the session time</title>\n";
    out_ += "<defs><clipPath id=\"plot-clip\"><rect x=\"" + fixed(kLeft, 0) + "\" y=\"" + fixed(kTop, 0) +
            "\" width=\"" + fixed(kW - kLeft - kRight, 0) + "\" height=\"" + fixed(kPlotH, 0) +
            "\"/></clipPath></defs>\n";
    out_ += "<rect x=\"" + fixed(kLeft, 0) + "\" y=\"" + fixed(kTop, 0) + "\" width=\"" +
            fixed(kW - kLeft - kRight, 0) + "\" height=\"" + fixed(kPlotH, 0) +
            "\" fill=\"#ffffff\" stroke=\"#9aa3ad\"/>\n";

    // Bands, under the grid.
    out_ += "<g id=\"bands\" clip-path=\"url(#plot-clip)\">\n";
    std::map<std::string, std::size_t> style_of;
    for (const BandSpan& s : r_.bands) {
      if (!style_of.count(s.band.name)) {
        const std::size_t k = style_of.size() % kBandStyles.size();
        style_of[s.band.name] = k;
      }
    }
    for (const BandSpan& s : r_.bands) {
      const BandStyle& st = kBandStyles[style_of[s.band.name]];
      const double x0 = x_of(s.from_s), x1 = x_of(std::min(s.to_s, t1));
      const double ytop = y_of(midi_of(s.band.high_hz)), ybot = y_of(midi_of(s.band.low_hz));
      const std::string name = escape_html(s.band.name);
      const std::string dash = *st.dash ? std::string(" stroke-dasharray=\"") + st.dash + "\"" : std::string();
      out_ += "<g class=\"band\" data-band=\"" + name + "\" data-low-hz=\"" + fixed(s.band.low_hz, 3) +
              "\" data-high-hz=\"" + fixed(s.band.high_hz, 3) + "\" data-from-s=\"" + fixed(s.from_s, 4) +
              "\" data-to-s=\"" + fixed(s.to_s, 4) + "\" data-fill-on-white=\"" + on_white(st.fill, kBandOpacity) +
              "\">";
      out_ += "<rect x=\"" + fixed(x0, 1) + "\" y=\"" + fixed(ytop, 1) + "\" width=\"" +
              fixed(std::max(0.0, x1 - x0), 1) + "\" height=\"" + fixed(std::max(0.0, ybot - ytop), 1) + "\" fill=\"" +
              st.fill + "\" fill-opacity=\"" + fixed(kBandOpacity, 2) + "\"/>";
      for (const double y : {ytop, ybot}) {
        out_ += "<line x1=\"" + fixed(x0, 1) + "\" x2=\"" + fixed(x1, 1) + "\" y1=\"" + fixed(y, 1) + "\" y2=\"" +
                fixed(y, 1) + "\" stroke=\"" + st.edge + "\" stroke-width=\"1.2\"" + dash + "/>";
      }
      out_ += "<title>band " + name + ": " + fixed(s.band.low_hz, 1) + " to " + fixed(s.band.high_hz, 1) +
              " Hz</title></g>\n";
    }
    out_ += "</g>\n";

    // Note grid: every semitone faint (when there is room), every C labelled with its name and frequency.
    const double px_per_st = kPlotH / (hi - lo);
    out_ += "<g id=\"grid\" font-size=\"11\" fill=\"#3c444c\">\n";
    for (int m = static_cast<int>(lo); m <= static_cast<int>(hi); ++m) {
      const bool is_c = ((m % 12) + 12) % 12 == 0;
      if (!is_c && px_per_st < 5.0) continue;
      const double y = y_of(m);
      out_ += "<line x1=\"" + fixed(kLeft, 0) + "\" x2=\"" + fixed(kW - kRight, 0) + "\" y1=\"" + fixed(y, 1) +
              "\" y2=\"" + fixed(y, 1) + "\" stroke=\"" + (is_c ? "#a9b0b8" : "#e4e6e9") + "\" stroke-width=\"" +
              (is_c ? "1" : "0.6") + "\"/>";
      if (is_c || px_per_st >= 14.0) {
        out_ += "<text x=\"" + fixed(kLeft - 6, 0) + "\" y=\"" + fixed(y + 4, 1) + "\" text-anchor=\"end\"" +
                (is_c ? " font-weight=\"bold\"" : " fill=\"#7a838c\"") + ">" + dsp::note_name(m) +
                (is_c ? " " + fixed(dsp::hz_from_midi(m), 1) + " Hz" : std::string()) + "</text>";
      }
      out_ += "\n";
    }
    out_ += "</g>\n";

    // Time axis.
    const double step = nice_step(t1 - t0, 10);
    out_ += "<g id=\"time-axis\" font-size=\"11\" fill=\"#3c444c\">";
    for (double t = std::ceil(t0 / step) * step; t <= t1 + 1e-9; t += step) {
      const double x = x_of(t);
      out_ += "<line x1=\"" + fixed(x, 1) + "\" x2=\"" + fixed(x, 1) + "\" y1=\"" + fixed(plot_bottom, 0) + "\" y2=\"" +
              fixed(plot_bottom + 5, 0) + "\" stroke=\"#3c444c\"/><text x=\"" + fixed(x, 1) + "\" y=\"" +
              fixed(plot_bottom + 17, 0) + "\" text-anchor=\"middle\">" + time_label(t, step, t1 - t0) + "</text>";
    }
    out_ += "</g>\n";

    // Exercises along the time axis.
    out_ += "<g id=\"exercise-lane\" font-size=\"11\"><text x=\"" + fixed(kLeft - 6, 0) + "\" y=\"" +
            fixed(lane_top + 19, 0) + "\" text-anchor=\"end\" fill=\"#3c444c\">exercises</text>";
    for (std::size_t i = 0; i < r_.exercises.size(); ++i) {
      const Exercise& x = r_.exercises[i];
      const double x0 = x_of(x.started_s), x1 = x_of(std::min(x.ended_s.value_or(t1), t1));
      std::string name = std::to_string(i + 1) + " " + x.preset + (x.ended_s ? "" : " (not ended)");
      out_ += "<g class=\"exercise-span\"><rect x=\"" + fixed(x0, 1) + "\" y=\"" + fixed(lane_top + 4, 0) +
              "\" width=\"" + fixed(std::max(1.0, x1 - x0), 1) + "\" height=\"" + fixed(kLaneH - 6, 0) +
              "\" fill=\"#e8ebf0\" stroke=\"#4a5563\"" + (x.ended_s ? "" : " stroke-dasharray=\"4 3\"") +
              "/><text x=\"" + fixed(x0 + 4, 1) + "\" y=\"" + fixed(lane_top + 20, 0) + "\" fill=\"#1e2328\">" +
              escape_html(shorten(name, 40)) + "</text><title>exercise " + escape_html(name) + "</title></g>";
    }
    out_ += "</g>\n";

    // Band labels (over the grid), at the start of each span.
    out_ += "<g id=\"band-labels\" font-size=\"11\" font-weight=\"bold\" clip-path=\"url(#plot-clip)\">";
    for (const BandSpan& s : r_.bands) {
      const BandStyle& st = kBandStyles[style_of[s.band.name]];
      out_ += "<text x=\"" + fixed(x_of(s.from_s) + 4, 1) + "\" y=\"" + fixed(y_of(midi_of(s.band.high_hz)) + 12, 1) +
              "\" fill=\"" + st.edge + "\" stroke=\"#ffffff\" stroke-width=\"3\" paint-order=\"stroke\">" +
              escape_html(s.band.name) + " " + fixed(s.band.low_hz, 0) + "–" + fixed(s.band.high_hz, 0) + " Hz</text>";
    }
    out_ += "</g>\n";

    // The contour: one path, a new subpath after every gap.
    std::string d;
    d.reserve(r_.contour.size() * 14);
    bool pen_down = false;
    int runs = 0;
    for (const ContourPoint& p : r_.contour) {
      if (!p.semitone) {
        pen_down = false;
        continue;
      }
      d += pen_down ? "L" : (d.empty() ? "M" : " M");
      d += fixed(x_of(p.time_s), 1) + " " + fixed(y_of(*p.semitone), 1);
      if (!pen_down) ++runs;
      pen_down = true;
    }
    out_ += "<path id=\"contour-line\" clip-path=\"url(#plot-clip)\" data-runs=\"" + std::to_string(runs) +
            "\" fill=\"none\" stroke=\"" + kContourColour +
            "\" stroke-width=\"2\" stroke-linejoin=\"round\" stroke-linecap=\"round\" d=\"" + d + "\"/>\n";

    // Markers: a dashed line and the label.
    out_ += "<g id=\"marker-lines\" font-size=\"11\" fill=\"" + std::string(kMarkerColour) + "\">";
    for (std::size_t i = 0; i < r_.markers.size(); ++i) {
      const Marker& m = r_.markers[i];
      const double x = x_of(m.time_s);
      // Labels in the chart while they can be read; beyond 40 markers only their numbers (the table has all).
      const std::string label = r_.markers.size() <= 40 ? escape_html(shorten(m.label, 28)) : std::string();
      const double label_y = 11.0 + static_cast<double>(i % 2) * 12.0;  // two rows above the plot
      out_ += "<g class=\"marker\" data-time-s=\"" + fixed(m.time_s, 4) + "\"><line x1=\"" + fixed(x, 1) + "\" x2=\"" +
              fixed(x, 1) + "\" y1=\"" + fixed(label_y + 3.0, 0) + "\" y2=\"" + fixed(plot_bottom, 0) + "\" stroke=\"" +
              kMarkerColour + "\" stroke-width=\"1\" stroke-dasharray=\"5 3\"/><text x=\"" + fixed(x + 3, 1) +
              "\" y=\"" + fixed(label_y, 0) + "\">M" + std::to_string(i + 1) + " " + label + "</text><title>marker M" +
              std::to_string(i + 1) + ": " + escape_html(m.label) + "</title></g>";
    }
    out_ += "</g>\n</svg>\n";

    // Legend, in words.
    out_ +=
        "<ul class=\"legend\" id=\"contour-legend\"><li><svg viewBox=\"0 0 34 14\" aria-hidden=\"true\"><line x1=\"2\" "
        "x2=\"32\" y1=\"7\" y2=\"7\" stroke=\"" +
        std::string(kContourColour) +
        "\" stroke-width=\"2\"/></svg>settled F0 (solid line; a gap where unvoiced)</li>"
        "<li><svg viewBox=\"0 0 34 14\" aria-hidden=\"true\"><line x1=\"17\" x2=\"17\" y1=\"0\" y2=\"14\" stroke=\"" +
        kMarkerColour + "\" stroke-dasharray=\"5 3\"/></svg>marker (dashed vertical line, labelled M1, M2…)</li>";
    for (const auto& [name, k] : style_of) {
      const BandStyle& st = kBandStyles[k];
      out_ +=
          "<li><svg viewBox=\"0 0 34 14\" aria-hidden=\"true\"><rect x=\"1\" y=\"2\" width=\"32\" height=\"10\" "
          "fill=\"" +
          std::string(st.fill) + "\" fill-opacity=\"" + fixed(kBandOpacity, 2) + "\" stroke=\"" + st.edge + "\"" +
          (*st.dash ? std::string(" stroke-dasharray=\"") + st.dash + "\"" : std::string()) +
          "/></svg>target band <b>" + escape_html(name) + "</b> (shaded while active, " +
          (*st.dash ? "dashed" : "solid") + " edges)</li>";
    }
    out_ +=
        "<li><svg viewBox=\"0 0 34 14\" aria-hidden=\"true\"><rect x=\"1\" y=\"2\" width=\"32\" height=\"10\" "
        "fill=\"#e8ebf0\" stroke=\"#4a5563\"/></svg>exercise (box below the time axis; dashed when not ended)</li>";
    out_ += "</ul>\n</section>\n";
  }

  // ---- histogram ----

  void histogram() {
    out_ += "<section id=\"distribution\">\n<h2>Distribution of the voiced F0</h2>\n";
    if (r_.histogram.empty() || r_.voiced_frames == 0) {
      out_ += "<p>No voiced frame in this session.</p>\n</section>\n";
      return;
    }
    out_ +=
        "<p class=\"note\">Share of the voiced time per semitone: each voiced settled frame counts for the note "
        "nearest to its F0 (bins one semitone wide, centred on the equal-tempered notes, A4 = 440 Hz).</p>\n";
    const int low = r_.histogram.begin()->first, high = r_.histogram.rbegin()->first;
    std::int64_t most = 0;
    for (const auto& [m, n] : r_.histogram) most = std::max(most, n);
    constexpr double kW = 1000, kLabelW = 150, kRow = 16, kBarMax = 720;
    const double height = kRow * (high - low + 1) + 8;
    out_ += "<svg id=\"histogram\" viewBox=\"0 0 " + fixed(kW, 0) + " " + fixed(height, 0) +
            "\" role=\"img\" aria-label=\"Share of voiced time per semitone\" font-size=\"11\">\n";
    for (int m = high; m >= low; --m) {
      const auto it = r_.histogram.find(m);
      const std::int64_t n = it == r_.histogram.end() ? 0 : it->second;
      const double share = static_cast<double>(n) / static_cast<double>(r_.voiced_frames);
      const double y = 4 + kRow * (high - m);
      const double w = kBarMax * static_cast<double>(n) / static_cast<double>(most);
      const bool is_c = ((m % 12) + 12) % 12 == 0;
      out_ += "<g class=\"bin\" data-note=\"" + dsp::note_name(m) + "\" data-share=\"" + fixed(share, 6) +
              "\"><text x=\"" + fixed(kLabelW - 8, 0) + "\" y=\"" + fixed(y + 11.5, 1) + "\" text-anchor=\"end\"" +
              (is_c ? " font-weight=\"bold\"" : "") + ">" + dsp::note_name(m) + " " + fixed(dsp::hz_from_midi(m), 1) +
              " Hz</text><rect x=\"" + fixed(kLabelW, 0) + "\" y=\"" + fixed(y + 2, 1) + "\" width=\"" + fixed(w, 1) +
              "\" height=\"" + fixed(kRow - 4, 0) + "\" fill=\"" + kContourColour +
              "\" fill-opacity=\"0.75\"/><text x=\"" + fixed(kLabelW + w + 6, 1) + "\" y=\"" + fixed(y + 11.5, 1) +
              "\" fill=\"#1e2328\">" + fixed(100.0 * share, 1) + " %</text></g>\n";
    }
    out_ += "</svg>\n</section>\n";
  }

  // ---- summary ----

  void summary() {
    out_ += "<section id=\"summary\">\n<h2>Session summary</h2>\n";
    std::optional<double> voiced_s, p5, p50, p95, range;
    std::string from;
    if (r_.summary) {
      voiced_s = number_of(*r_.summary, "voiced_s");
      p5 = number_of(*r_.summary, "f0_p5_hz");
      p50 = number_of(*r_.summary, "f0_p50_hz");
      p95 = number_of(*r_.summary, "f0_p95_hz");
      range = number_of(*r_.summary, "f0_range_st");
      from = "From summary.json.";
    } else {
      voiced_s = static_cast<double>(r_.voiced_frames) * r_.hop_ms / 1000.0;
      p5 = r_.p5_hz;
      p50 = r_.p50_hz;
      p95 = r_.p95_hz;
      if (p5 && p95) range = 12.0 * std::log2(*p95 / *p5);
      from = "Computed from session.jsonl the way the daemon writes summary.json (there is no summary.json).";
    }
    out_ += "<p class=\"note\">" + from +
            " Definitions: docs/measures.md and docs/sessions.md.</p>\n<dl class=\"measures\">";
    const double dur = duration();
    std::string voiced = fixed_or_dash(voiced_s, 3, " s");
    if (voiced_s && dur > 0) voiced += " (" + fixed(100.0 * *voiced_s / dur, 1) + " % of " + duration_text(dur) + ")";
    out_ += "<dt>Voiced time</dt><dd id=\"sum-voiced\">" + voiced +
            "<span>Settled frames with an F0 × the hop: the time the vocal folds vibrated (phonation time; "
            "docs/measures.md, \"Exercise summary\", voiced_s).</span></dd>";
    out_ += "<dt>F0, 5th percentile</dt><dd id=\"sum-p5\">" + hz_and_note(p5) +
            "<span>5 % of the voiced frames are lower (docs/sessions.md: the centre of a 10-cent bin, nearest "
            "rank; within 5 cents).</span></dd>";
    out_ += "<dt>F0, median (50th percentile)</dt><dd id=\"sum-p50\">" + hz_and_note(p50) +
            "<span>Half the voiced frames are lower, half higher.</span></dd>";
    out_ += "<dt>F0, 95th percentile</dt><dd id=\"sum-p95\">" + hz_and_note(p95) +
            "<span>5 % of the voiced frames are higher.</span></dd>";
    out_ += "<dt>F0 range, p5 to p95</dt><dd id=\"sum-range\">" + fixed_or_dash(range, 2, " semitones") +
            "<span>12·log2(p95 / p5): the width of the central 90 % of the voiced F0 (docs/measures.md, "
            "f0_range_st).</span></dd>";
    if (!r_.band_crossings.empty()) {
      std::string crossings;
      for (const auto& [name, n] : r_.band_crossings) {
        crossings += (crossings.empty() ? "" : ", ") + escape_html(name) + ": " + std::to_string(n);
      }
      out_ += "<dt>Band crossings</dt><dd id=\"sum-crossings\">" + crossings +
              "<span>Changes of the held band state (docs/measures.md, \"Band state\").</span></dd>";
    }
    out_ += "</dl>\n</section>\n";
  }

  // ---- exercises ----

  void exercises() {
    out_ += "<section id=\"exercises\">\n<h2>Exercises</h2>\n";
    if (r_.exercises.empty()) {
      out_ += "<p>No exercise in this session.</p>\n</section>\n";
      return;
    }
    out_ +=
        "<p class=\"note\">From the exercise files (exercise-NN-PRESET.json) and, for an exercise that did not end, "
        "from session.jsonl. Times on the audio clock. Definitions: docs/measures.md, \"Exercise summary\". "
        "Inside a band: the share of the voiced frames inside it while it was active (from the summary) and "
        "that time (voiced frames inside × the hop, counted in the log).</p>\n";
    out_ +=
        "<table id=\"exercise-table\"><thead><tr><th>#</th><th>preset</th><th>label</th><th class=\"num\">start "
        "s</th><th class=\"num\">end s</th><th>ended by</th><th class=\"num\">voiced s</th><th>median F0</th>"
        "<th class=\"num\">p5–p95 st</th><th class=\"num\">SD st</th><th class=\"num\">cycle dose</th>"
        "<th>inside bands</th></tr></thead><tbody>\n";
    for (std::size_t i = 0; i < r_.exercises.size(); ++i) {
      const Exercise& x = r_.exercises[i];
      const json& s = x.summary;
      auto cell = [&](const char* field, const std::string& html, bool num = true) {
        out_ += std::string("<td") + (num ? " class=\"num\"" : "") + " data-field=\"" + field + "\">" + html + "</td>";
      };
      out_ += "<tr class=\"exercise\" data-file=\"" + escape_html(x.file) + "\">";
      cell("n", std::to_string(i + 1), false);
      cell("preset", escape_html(x.preset), false);
      cell("label", escape_html(x.label), false);
      cell("started_s", fixed(x.started_s, 3));
      if (x.ended_s) {
        cell("ended_s", fixed(*x.ended_s, 3));
        cell("by", escape_html(x.by.empty() ? "–" : x.by), false);
      } else {
        cell("ended_s", "<b>not ended</b>");
        cell("by", x.by.empty() ? "–" : "started by " + escape_html(x.by), false);
      }
      if (s.is_object()) {
        cell("voiced_s", fixed_or_dash(number_of(s, "voiced_s"), 3));
        const auto p50 = number_of(s, "f0_p50_hz");
        cell("f0_p50_hz", p50 ? fixed(*p50, 3) + " Hz<br>" + note_text(*p50) : "–", false);
        cell("f0_range_st", fixed_or_dash(number_of(s, "f0_range_st"), 3));
        cell("f0_sd_st", fixed_or_dash(number_of(s, "f0_sd_st"), 3));
        cell("cycle_dose", fixed_or_dash(number_of(s, "cycle_dose"), 1));
      } else {
        const std::string none = x.ended_s ? "no summary" : "–";
        for (const char* f : {"voiced_s", "f0_p50_hz", "f0_range_st", "f0_sd_st", "cycle_dose"}) cell(f, none);
      }
      std::string inside;
      for (const BandTime& b : x.bands) {
        inside += "<div data-band=\"" + escape_html(b.name) + "\"><b>" + escape_html(b.name) +
                  "</b>: " + (b.inside_fraction ? fixed(100.0 * *b.inside_fraction, 1) + " %, " : std::string()) +
                  fixed(b.inside_s, 2) + " s</div>";
      }
      cell("bands", inside.empty() ? "–" : inside, false);
      out_ += "</tr>\n";
      if (!x.file.empty() || !x.ended_wall.empty()) {
        out_ += "<tr class=\"sub\"><td></td><td colspan=\"11\" class=\"note\">" +
                (x.file.empty() ? std::string("no exercise file (from the log)") : "file " + escape_html(x.file)) +
                (x.ended_wall.empty() ? std::string() : "; ended " + escape_html(x.ended_wall)) +
                (s.is_object() ? "; p5 " + fixed_or_dash(number_of(s, "f0_p5_hz"), 1, " Hz") + ", p95 " +
                                     fixed_or_dash(number_of(s, "f0_p95_hz"), 1, " Hz") + ", duration " +
                                     fixed_or_dash(number_of(s, "duration_s"), 3, " s")
                               : std::string()) +
                "</td></tr>\n";
      }
    }
    out_ += "</tbody></table>\n</section>\n";
  }

  // ---- markers ----

  void markers() {
    out_ += "<section id=\"markers\">\n<h2>Markers</h2>\n";
    if (r_.markers.empty()) {
      out_ += "<p>No marker in this session.</p>\n</section>\n";
      return;
    }
    out_ +=
        "<table id=\"marker-table\"><thead><tr><th>#</th><th class=\"num\">time_s</th><th class=\"num\">sample</th>"
        "<th>wall (UTC)</th><th>label</th><th>by</th><th>data</th></tr></thead><tbody>\n";
    for (std::size_t i = 0; i < r_.markers.size(); ++i) {
      const Marker& m = r_.markers[i];
      out_ += "<tr class=\"marker\"><td>M" + std::to_string(i + 1) + "</td><td class=\"num\">" + fixed(m.time_s, 4) +
              "</td><td class=\"num\">" + (m.sample ? std::to_string(*m.sample) : std::string("–")) + "</td><td>" +
              escape_html(m.wall) + "</td><td data-field=\"label\">" + escape_html(m.label) + "</td><td>" +
              escape_html(m.by.empty() ? "–" : m.by) + "</td><td data-field=\"data\">" +
              (m.data.empty() ? std::string("–") : "<code>" + escape_html(m.data) + "</code>") + "</td></tr>\n";
    }
    out_ += "</tbody></table>\n</section>\n";
  }

  void happenings(const std::vector<Happening>& list, const char* id) {
    out_ += std::string("<table id=\"") + id +
            "\"><thead><tr><th class=\"num\">time_s</th><th>wall (UTC)</th><th>what</th><th>by</th><th>details</th>"
            "</tr></thead><tbody>\n";
    for (const Happening& h : list) {
      out_ += "<tr><td class=\"num\">" + (h.time_s ? fixed(*h.time_s, 3) : std::string("–")) + "</td><td>" +
              escape_html(h.wall) + "</td><td>" + escape_html(h.kind) + "</td><td>" +
              escape_html(h.by.empty() ? "–" : h.by) + "</td><td>" + escape_html(h.text) + "</td></tr>\n";
    }
    out_ += "</tbody></table>\n";
  }

  void problems() {
    out_ += "<section id=\"problems\">\n<h2>Recording problems, gaps and device events</h2>\n";
    if (r_.problems.empty() && r_.unreadable_lines == 0) {
      out_ += "<p>None recorded.</p>\n</section>\n";
      return;
    }
    if (r_.unreadable_lines > 0) {
      out_ += "<p>" + std::to_string(r_.unreadable_lines) + " unreadable " +
              (r_.unreadable_lines == 1 ? "line" : "lines") + " skipped (see above).</p>\n";
    }
    if (!r_.problems.empty()) happenings(r_.problems, "problem-table");
    out_ += "</section>\n";
  }

  void changes() {
    out_ += "<section id=\"changes\">\n<h2>Bands, reference and other events</h2>\n";
    if (r_.changes.empty()) {
      out_ += "<p>None recorded.</p>\n</section>\n";
      return;
    }
    happenings(r_.changes, "change-table");
    out_ += "</section>\n";
  }

  const SessionRecord& r_;
  std::string out_;
};

}  // namespace

std::string render_html(const SessionRecord& record, const std::string& generated_by) {
  return Page(record).render(generated_by);
}

}  // namespace report

// ---- the command ----------------------------------------------------------------------------------------

namespace {

void complain(const std::string& message) { std::fprintf(stderr, "pitchwire report: %s\n", message.c_str()); }

// Writes text to path through path.tmp (mode 0600) and a rename: the report is whole or absent.
bool write_private(const fs::path& path, const std::string& text, std::string& why) {
  const fs::path tmp = path.string() + ".tmp";
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC | O_NOFOLLOW, 0600);
  if (fd < 0) {
    why = std::strerror(errno);
    return false;
  }
  bool ok = ::fchmod(fd, 0600) == 0;  // an older tmp file may have had other bits
  std::size_t done = 0;
  while (ok && done < text.size()) {
    const ssize_t n = ::write(fd, text.data() + done, text.size() - done);
    if (n < 0 && errno == EINTR) continue;
    if (n <= 0) {
      ok = false;
      break;
    }
    done += static_cast<std::size_t>(n);
  }
  if (!ok) why = std::strerror(errno == 0 ? EIO : errno);
  if (ok && ::fsync(fd) != 0) {
    ok = false;
    why = std::strerror(errno);
  }
  if (::close(fd) != 0 && ok) {
    ok = false;
    why = std::strerror(errno);
  }
  if (ok && ::rename(tmp.c_str(), path.c_str()) != 0) {
    ok = false;
    why = std::strerror(errno);
  }
  if (!ok) ::unlink(tmp.c_str());
  return ok;
}

}  // namespace

int run_report(const ReportOptions& options) {
  const fs::path folder = options.session_dir;
  report::SessionRecord record;
  try {
    record = report::load_session(folder, options.max_points);
  } catch (const report::SessionError& e) {
    complain(e.what());
    return 1;
  } catch (const std::exception& e) {  // bad_alloc and the like: still one line
    complain(folder.string() + ": " + e.what());
    return 1;
  }
  const fs::path out = options.out_path.empty() ? folder / "report.html" : fs::path(options.out_path);
  const std::string html = report::render_html(record, std::string("pitchwire ") + PITCHWIRE_VERSION);
  std::string why;
  if (!write_private(out, html, why)) {
    complain(out.string() + ": cannot write: " + why);
    return 1;
  }
  return 0;
}

}  // namespace pitchwire::cli
