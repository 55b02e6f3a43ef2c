// live.cpp: see live.h.
#include "live.h"

#include <sys/ioctl.h>
#include <unistd.h>

#include <signal.h>

#include <algorithm>
#include <atomic>
#include <cctype>
#include <functional>
#include <chrono>
#include <cmath>
#include <csignal>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>

#include "live_client.h"
#include "pitchwire/dsp/units.h"

namespace pitchwire::cli {
namespace {

namespace fs = std::filesystem;
using Json = nlohmann::json;
using Clock = std::chrono::steady_clock;

std::atomic<bool> g_stop{false};
extern "C" void on_stop_signal(int) { g_stop.store(true); }

void install_stop_handlers() {
  g_stop.store(false);
  struct sigaction sa {};
  sa.sa_handler = on_stop_signal;
  sigemptyset(&sa.sa_mask);
  sigaction(SIGINT, &sa, nullptr);
  sigaction(SIGTERM, &sa, nullptr);
}

std::string trim(std::string s) {
  const auto not_space = [](unsigned char c) { return !std::isspace(c); };
  s.erase(s.begin(), std::find_if(s.begin(), s.end(), not_space));
  s.erase(std::find_if(s.rbegin(), s.rend(), not_space).base(), s.end());
  return s;
}

// $XDG_STATE_HOME/pitchwire or ~/.local/state/pitchwire: where the daemon writes its tokens by default.
std::optional<fs::path> default_state_dir() {
  if (const char* xdg = std::getenv("XDG_STATE_HOME"); xdg && *xdg == '/') return fs::path(xdg) / "pitchwire";
  if (const char* home = std::getenv("HOME"); home && *home) return fs::path(home) / ".local" / "state" / "pitchwire";
  return std::nullopt;
}

struct TokenChoice {
  std::string token;
  std::string problem;  // set when a file given could not be read
};

// --token, then PITCHWIRE_TOKEN, then --token-file, then the daemon's default files for the roles wanted.
TokenChoice choose_token(const LiveOptions& o, const std::vector<std::string>& default_roles) {
  if (!o.token.empty()) return {o.token, {}};
  if (const char* env = std::getenv("PITCHWIRE_TOKEN"); env && *env) return {trim(env), {}};
  auto read = [](const fs::path& p) -> std::optional<std::string> {
    std::ifstream in(p);
    if (!in) return std::nullopt;
    std::stringstream text;
    text << in.rdbuf();
    return trim(text.str());
  };
  if (!o.token_file.empty()) {
    if (auto t = read(o.token_file); t && !t->empty()) return {*t, {}};
    return {{}, o.token_file + ": cannot read a token from it"};
  }
  if (const auto dir = default_state_dir()) {
    for (const std::string& role : default_roles) {
      if (auto t = read(*dir / (role + ".token")); t && !t->empty()) return {*t, {}};
    }
  }
  return {};
}

LiveTarget target_of(const LiveOptions& o, std::string token) {
  LiveTarget t;
  t.host = o.host;
  t.port = o.port;
  t.token = std::move(token);
  return t;
}

// Waits for the daemon's hello (the first message of every connection).
Json wait_hello(LiveClient& client) {
  const auto deadline = Clock::now() + std::chrono::seconds(5);
  while (Clock::now() < deadline) {
    if (auto text = client.receive(std::chrono::milliseconds(200))) {
      Json m = Json::parse(*text, nullptr, false);
      if (m.is_object() && m.value("type", "") == "hello") return m;
    }
  }
  throw LiveError("no hello from " + client.describe() + " within 5 s (is it pitchwired?)");
}

std::string fixed(double v, int decimals) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

bool stdout_is_terminal() { return ::isatty(STDOUT_FILENO) == 1; }

int terminal_width() {
  winsize ws{};
  if (::ioctl(STDOUT_FILENO, TIOCGWINSZ, &ws) == 0 && ws.ws_col > 0) return ws.ws_col;
  return 80;
}

// ---- watch ----------------------------------------------------------------------------------------------

struct BandView {
  std::string name;
  double low_hz = 0, high_hz = 0;
  std::string state = "unvoiced";  // held state: below, inside, above, unvoiced
};

struct WatchState {
  std::string role = "observer";
  double reference_hz = 100.0;
  std::optional<double> spl_offset_db;
  std::optional<double> f0_hz;
  std::optional<double> level_dbfs;
  double time_s = 0.0;
  std::vector<BandView> bands;
  Json stats;                 // the last stats message
  std::string exercise;       // label of the running exercise, or empty
  std::string last_event;     // one line about the last event
};

void read_bands(WatchState& s, const Json& list) {
  std::vector<BandView> next;
  for (const Json& b : list) {
    BandView v{b.value("name", ""), b.value("low_hz", 0.0), b.value("high_hz", 0.0), "unvoiced"};
    for (const BandView& old : s.bands) {
      if (old.name == v.name) v.state = old.state;
    }
    next.push_back(v);
  }
  s.bands = std::move(next);
}

std::string describe_event(const Json& e) {
  const std::string kind = e.value("kind", "");
  const Json p = e.value("payload", Json::object());
  std::string text = fixed(e.value("time_s", 0.0), 1) + " s " + kind;
  if (kind == "band_crossing") {
    text += " " + p.value("name", "") + ": " + p.value("from", "") + " -> " + p.value("to", "");
  } else if (kind == "marker") {
    text += " \"" + p.value("label", "") + "\"";
  } else if (kind == "exercise_started" || kind == "exercise_ended") {
    text += " " + p.value("preset", "");
  } else if (kind == "reference_changed") {
    text += " " + fixed(p.value("reference_hz", 0.0), 2) + " Hz";
  } else if (kind == "dose_limit") {
    text += " " + p.value("measure", "") + " passed " + fixed(p.value("limit", 0.0), 0);
  } else if (kind == "band_changed") {
    text += " " + p.value("name", "");
  }
  if (e.contains("by")) text += " (by " + e.value("by", "") + ")";
  return text;
}

void update_state(WatchState& s, const Json& m) {
  const std::string type = m.value("type", "");
  if (type == "hello") {
    s.role = m.value("role", "observer");
    s.reference_hz = m.value("reference_hz", 100.0);
    if (m.contains("spl_offset_db") && m["spl_offset_db"].is_number()) s.spl_offset_db = m["spl_offset_db"].get<double>();
    read_bands(s, m.value("bands", Json::array()));
    if (m.contains("exercise") && m["exercise"].is_object()) {
      const Json& x = m["exercise"];
      s.exercise = x.value("label", "").empty() ? x.value("preset", "") : x.value("label", "");
    }
  } else if (type == "frame") {
    s.time_s = m.value("time_s", s.time_s);
    s.f0_hz = m.contains("f0_hz") && m["f0_hz"].is_number() ? std::optional<double>(m["f0_hz"].get<double>()) : std::nullopt;
    if (m.contains("level_dbfs") && m["level_dbfs"].is_number()) s.level_dbfs = m["level_dbfs"].get<double>();
  } else if (type == "stats") {
    s.stats = m;
    for (const Json& b : m.value("bands", Json::array())) {
      for (BandView& v : s.bands) {
        if (v.name == b.value("name", "")) v.state = b.value("state", v.state);
      }
    }
  } else if (type == "event") {
    const std::string kind = m.value("kind", "");
    const Json p = m.value("payload", Json::object());
    if (kind == "band_changed") read_bands(s, p.value("bands", Json::array()));
    if (kind == "band_crossing") {
      for (BandView& v : s.bands) {
        if (v.name == p.value("name", "")) v.state = p.value("to", v.state);
      }
    }
    if (kind == "reference_changed") s.reference_hz = p.value("reference_hz", s.reference_hz);
    if (kind == "exercise_started") s.exercise = p.value("label", "").empty() ? p.value("preset", "") : p.value("label", "");
    if (kind == "exercise_ended") s.exercise.clear();
    s.last_event = describe_event(m);
  }
}

// Where the voice is in a band: a bar of `width` characters whose middle third is the band (its edges '|'),
// the voice '*' on a semitone scale, '<' or '>' at an end when it is further out, nothing when unvoiced.
std::string band_bar(const BandView& b, std::optional<double> f0_hz, int width) {
  width = std::max(width, 7);
  std::string bar(static_cast<std::size_t>(width), '-');
  const int third = width / 3;
  const int left_edge = third, right_edge = width - 1 - third;
  bar[static_cast<std::size_t>(left_edge)] = '|';
  bar[static_cast<std::size_t>(right_edge)] = '|';
  if (f0_hz && *f0_hz > 0 && b.high_hz > b.low_hz) {
    const double lo = std::log2(b.low_hz), hi = std::log2(b.high_hz);
    const double pos = (std::log2(*f0_hz) - lo) / (hi - lo);  // 0 at the low edge, 1 at the high edge
    const double x = left_edge + pos * (right_edge - left_edge);
    if (x < 0) {
      bar[0] = '<';
    } else if (x > width - 1) {
      bar[static_cast<std::size_t>(width - 1)] = '>';
    } else {
      bar[static_cast<std::size_t>(std::lround(x))] = '*';
    }
  }
  return "[" + bar + "]";
}

class Painter {
 public:
  Painter(bool color, int width) : color_(color), width_(width) {}
  [[nodiscard]] std::string state_word(const std::string& state) const {
    std::string word = state;
    for (char& c : word) c = static_cast<char>(std::toupper(static_cast<unsigned char>(c)));
    if (!color_) return word;
    const char* code = state == "inside" ? "1;32" : state == "unvoiced" ? "2" : "1;33";
    return "\x1b[" + std::string(code) + "m" + word + "\x1b[0m";
  }
  // Visible length: ANSI sequences take no room.
  static std::size_t visible(const std::string& s) {
    std::size_t n = 0;
    for (std::size_t i = 0; i < s.size(); ++i) {
      if (s[i] == '\x1b') {
        while (i < s.size() && s[i] != 'm') ++i;
        continue;
      }
      if ((static_cast<unsigned char>(s[i]) & 0xC0) != 0x80) ++n;
    }
    return n;
  }
  // Cuts to the width (never inside an ANSI sequence; a colour is reset after a cut).
  [[nodiscard]] std::string fit(const std::string& s) const {
    if (visible(s) <= static_cast<std::size_t>(width_)) return s;
    std::string out;
    std::size_t n = 0;
    for (std::size_t i = 0; i < s.size() && n < static_cast<std::size_t>(width_); ++i) {
      if (s[i] == '\x1b') {
        const std::size_t end = s.find('m', i);
        out += s.substr(i, end - i + 1);
        i = end;
        continue;
      }
      out += s[i];
      if ((static_cast<unsigned char>(s[i]) & 0xC0) != 0x80) ++n;
    }
    if (color_) out += "\x1b[0m";
    return out;
  }
  [[nodiscard]] int width() const { return width_; }

 private:
  bool color_;
  int width_;
};

std::string note_text(std::optional<double> f0_hz) {
  if (!f0_hz) return "unvoiced";
  const dsp::NoteReading n = dsp::nearest_note(*f0_hz);
  const long cents = std::lround(n.cents_off);
  return n.name + " " + (cents >= 0 ? "+" : "") + std::to_string(cents) + " ct  " + fixed(*f0_hz, 1) + " Hz";
}

// One line: the most important parts first; parts that do not fit the width are left out whole.
std::string watch_line(const WatchState& s, const Painter& p) {
  std::vector<std::string> parts;
  parts.push_back(note_text(s.f0_hz));
  for (const BandView& b : s.bands) parts.push_back(b.name + " " + p.state_word(b.state));
  if (!s.bands.empty()) parts.push_back(band_bar(s.bands.front(), s.f0_hz, 15));
  if (s.level_dbfs && *s.level_dbfs > -199.0) parts.push_back(fixed(*s.level_dbfs, 1) + " dBFS");
  if (s.stats.is_object() && s.stats.value("f0_p50_hz", Json()).is_number()) {
    parts.push_back("median " + fixed(s.stats["f0_p50_hz"].get<double>(), 1) + " Hz");
  }
  std::string line;
  for (const std::string& part : parts) {
    const std::string next = line.empty() ? part : line + "  " + part;
    if (Painter::visible(next) > static_cast<std::size_t>(p.width())) break;
    line = next;
  }
  return line.empty() ? p.fit(parts.front()) : line;
}

std::vector<std::string> watch_screen(const WatchState& s, const Painter& p, const std::string& where) {
  std::vector<std::string> lines;
  const int bar = std::clamp(p.width() - 48, 7, 31);
  lines.push_back("pitchwire watch  " + where + "  " + s.role + "  (Ctrl-C stops)");
  lines.push_back("");
  lines.push_back("Note      " + (s.f0_hz ? note_text(s.f0_hz) : std::string("unvoiced")));
  if (s.f0_hz) {
    lines.push_back("          " + fixed(dsp::semitones(*s.f0_hz, s.reference_hz), 2) + " st re " +
                    fixed(s.reference_hz, 2) + " Hz");
  } else {
    lines.push_back("");
  }
  std::string level = "Level     ";
  if (s.level_dbfs && *s.level_dbfs <= -199.0) {
    level += "digital silence";
  } else if (s.level_dbfs) {
    const double l = std::clamp(*s.level_dbfs, -60.0, 0.0);
    const int filled = static_cast<int>(std::lround((l + 60.0) / 60.0 * bar));
    level += fixed(*s.level_dbfs, 1) + " dBFS  [" + std::string(static_cast<std::size_t>(filled), '#') +
             std::string(static_cast<std::size_t>(bar - filled), '.') + "]";
    if (s.spl_offset_db) level += "  " + fixed(*s.level_dbfs + *s.spl_offset_db, 1) + " dB SPL (calibrated)";
  } else {
    level += "--";
  }
  lines.push_back(level);
  if (s.bands.empty()) lines.push_back("Bands     none set");
  for (const BandView& b : s.bands) {
    lines.push_back("Band      " + b.name + " " + fixed(b.low_hz, 1) + "-" + fixed(b.high_hz, 1) + " Hz  " +
                    p.state_word(b.state) + "  " + band_bar(b, s.f0_hz, bar));
  }
  if (s.stats.is_object()) {
    const Json& st = s.stats;
    auto num = [&](const char* k, int d, const char* unit) {
      return st.value(k, Json()).is_number() ? fixed(st[k].get<double>(), d) + unit : std::string("--");
    };
    lines.push_back("Stats     voiced " + fixed(100.0 * st.value("voiced_fraction", 0.0), 0) + " %  median " +
                    num("f0_p50_hz", 1, " Hz") + "  range " + num("f0_range_st", 1, " st") + "  SD " +
                    num("f0_sd_st", 2, " st"));
    lines.push_back("Dose      voiced " + num("session_voiced_s", 1, " s") + "  cycles " +
                    num("session_cycle_dose", 0, ""));
  }
  lines.push_back("Exercise  " + (s.exercise.empty() ? std::string("none running") : s.exercise));
  lines.push_back("Event     " + (s.last_event.empty() ? std::string("--") : s.last_event));
  for (std::string& l : lines) l = p.fit(l);
  return lines;
}

// ---- requests -------------------------------------------------------------------------------------------

// A band limit as the protocol takes it: a number of Hz, else the text (a note name or semitones).
Json limit_value(const std::string& text) {
  char* end = nullptr;
  const double v = std::strtod(text.c_str(), &end);
  if (end && *end == '\0' && !text.empty() && std::isfinite(v)) return v;
  return text;
}

// Waits for the answer to request `id` (ack or error) and, when `then` is given, for the first event for
// which it returns true. Returns the answer; the event, if any, in `event`.
Json await_answer(LiveClient& client, const std::string& id, const std::function<bool(const Json&)>& then,
                  Json& event) {
  Json answer;
  const auto deadline = Clock::now() + std::chrono::seconds(5);
  while (Clock::now() < deadline) {
    auto text = client.receive(std::chrono::milliseconds(100));
    if (!text) continue;
    Json m = Json::parse(*text, nullptr, false);
    if (!m.is_object()) continue;
    const std::string type = m.value("type", "");
    if ((type == "ack" || type == "error") && m.value("id", "") == id) answer = m;
    if (type == "event" && then && event.is_null() && then(m)) event = m;
    if (!answer.is_null() && (answer["type"] == "error" || !then || !event.is_null())) return answer;
  }
  if (answer.is_null()) throw LiveError("no answer from " + client.describe() + " within 5 s");
  return answer;
}

int usage(const std::string& command, const std::string& message) {
  std::fprintf(stderr, "pitchwire %s: %s\n", command.c_str(), message.c_str());
  return 2;
}

}  // namespace

int run_watch(const WatchOptions& o) {
  const TokenChoice token = choose_token(o.live, {});
  if (!token.problem.empty()) return usage("watch", token.problem);
  const bool tty = stdout_is_terminal();
  const char* no_color_env = std::getenv("NO_COLOR");
  const char* term = std::getenv("TERM");
  const bool color = tty && !o.no_color && !(no_color_env && *no_color_env) && !(term && std::string(term) == "dumb");
  const int width = o.width.value_or(tty ? terminal_width() : 80);
  // One column spare: a line that fills the last column leaves the cursor waiting to wrap, and the erase
  // after it would take the line's last character.
  const Painter painter(color, std::max(width - 1, 10));
  install_stop_handlers();
  WatchState state;
  bool drew = false;
  auto finish = [&] {
    if (o.full && tty) std::fputs("\x1b[?25h", stdout);
    if (drew && tty) std::fputc('\n', stdout);
    std::fflush(stdout);
  };
  try {
    LiveClient client(target_of(o.live, token.token));
    update_state(state, wait_hello(client));
    client.send(R"({"type":"subscribe","id":"watch","rate":{"fps":20},"fields":["f0_hz","level_dbfs"]})");
    if (o.full && tty) std::fputs("\x1b[?25l\x1b[2J", stdout);
    const auto started = Clock::now();
    auto last_draw = Clock::now() - std::chrono::seconds(1);
    const auto interval = tty ? std::chrono::milliseconds(100) : std::chrono::milliseconds(500);
    while (!g_stop.load()) {
      if (o.live.seconds && std::chrono::duration<double>(Clock::now() - started).count() >= *o.live.seconds) break;
      if (auto text = client.receive(std::chrono::milliseconds(50))) {
        const Json m = Json::parse(*text, nullptr, false);
        if (m.is_object()) update_state(state, m);
      }
      if (Clock::now() - last_draw < interval) continue;
      last_draw = Clock::now();
      if (o.full && tty) {
        std::string screen = "\x1b[H";
        for (const std::string& line : watch_screen(state, painter, client.describe())) screen += line + "\x1b[K\n";
        screen += "\x1b[J";
        std::fputs(screen.c_str(), stdout);
      } else if (o.full) {
        for (const std::string& line : watch_screen(state, painter, client.describe())) std::puts(line.c_str());
        std::puts("");
      } else if (tty) {
        std::fputc('\r', stdout);
        std::fputs(watch_line(state, painter).c_str(), stdout);
        std::fputs("\x1b[K", stdout);
      } else {
        std::puts(watch_line(state, painter).c_str());
      }
      drew = true;
      if (std::fflush(stdout) != 0) break;  // the reader went away
    }
    finish();
    client.close();
    return 0;
  } catch (const LiveError& e) {
    finish();
    std::fprintf(stderr, "pitchwire watch: %s\n", e.what());
    return 1;
  }
}

int run_tail(const TailOptions& o) {
  const TokenChoice token = choose_token(o.live, {});
  if (!token.problem.empty()) return usage("tail", token.problem);
  TailOptions opt = o;
  if (!opt.frames && !opt.settled && !opt.stats && !opt.events) opt.events = true;
  install_stop_handlers();
  try {
    LiveClient client(target_of(o.live, token.token));
    (void)wait_hello(client);
    if (opt.frames || opt.settled) {
      // Settled values come for the frames a connection is sent, so every hop is subscribed; with settled
      // values only, the frames carry no fields and are left out here.
      Json sub{{"type", "subscribe"}, {"id", "tail"}, {"settled", opt.settled}};
      if (!opt.frames) sub["fields"] = Json::array();
      client.send(sub.dump());
    }
    const auto started = Clock::now();
    long printed = 0;
    while (!g_stop.load() && !(opt.count && printed >= *opt.count)) {
      if (o.live.seconds && std::chrono::duration<double>(Clock::now() - started).count() >= *o.live.seconds) break;
      auto text = client.receive(std::chrono::milliseconds(100));
      if (!text) continue;
      const Json m = Json::parse(*text, nullptr, false);
      if (!m.is_object()) continue;
      const std::string type = m.value("type", "");
      const bool wanted = (type == "frame" && opt.frames) || (type == "settled" && opt.settled) ||
                          (type == "stats" && opt.stats) || (type == "event" && opt.events);
      if (!wanted) continue;
      std::fputs((*text + "\n").c_str(), stdout);
      if (std::fflush(stdout) != 0) break;
      ++printed;
    }
    client.close();
    return 0;
  } catch (const LiveError& e) {
    std::fprintf(stderr, "pitchwire tail: %s\n", e.what());
    return 1;
  }
}

int run_request(const RequestOptions& o) {
  const std::string& cmd = o.command;
  const auto& w = o.words;
  Json request;
  std::function<bool(const Json&)> then;  // the event that shows the request took effect
  const std::string id = "cli-" + std::to_string(::getpid());
  auto kind_is = [id](const std::string& kind) {
    return [kind](const Json& e) { return e.value("kind", "") == kind; };
  };
  std::vector<std::string> roles = {"supervisor"};
  if (cmd == "band" && w.size() == 4 && w[0] == "set") {
    request = Json{{"type", "set_band"}, {"name", w[1]}, {"low", limit_value(w[2])}, {"high", limit_value(w[3])}};
    then = kind_is("band_changed");
  } else if (cmd == "band" && w.size() == 2 && w[0] == "clear") {
    request = Json{{"type", "clear_band"}, {"name", w[1]}};
    then = kind_is("band_changed");
  } else if (cmd == "band") {
    return usage(cmd, "expected `band set NAME LOW HIGH` or `band clear NAME` (limits in Hz, note names or semitones)");
  } else if (cmd == "exercise" && w.size() == 2 && w[0] == "start") {
    request = Json{{"type", "start_exercise"}, {"preset", w[1]}};
    if (!o.label.empty()) request["label"] = o.label;
    then = kind_is("exercise_started");
  } else if (cmd == "exercise" && w.size() == 1 && w[0] == "end") {
    request = Json{{"type", "end_exercise"}};
    then = kind_is("exercise_ended");
  } else if (cmd == "exercise") {
    return usage(cmd, "expected `exercise start PRESET [--label TEXT]` or `exercise end`");
  } else if (cmd == "reference" && w.size() == 1) {
    request = Json{{"type", "set_reference"}, {"reference", limit_value(w[0])}};
    then = kind_is("reference_changed");
  } else if (cmd == "reference") {
    return usage(cmd, "expected `reference VALUE` (Hz, a note name such as G3, or semitones such as +2st)");
  } else if (cmd == "mark") {
    if (o.label.empty()) return usage(cmd, "expected `mark LABEL [--data JSON]`");
    request = Json{{"type", "mark"}, {"label", o.label}};
    if (!o.data.empty()) {
      Json data = Json::parse(o.data, nullptr, false);
      if (data.is_discarded() || !data.is_object()) return usage(cmd, "--data must be a JSON object, got " + o.data);
      request["data"] = std::move(data);
    }
    then = [id](const Json& e) {
      return e.value("kind", "") == "marker" && e.value("payload", Json::object()).value("id", "") == id;
    };
    roles = {"lab", "supervisor"};
  } else {
    return usage(cmd, "unknown command");
  }
  request["id"] = id;
  const TokenChoice token = choose_token(o.live, roles);
  if (!token.problem.empty()) return usage(cmd, token.problem);
  try {
    LiveClient client(target_of(o.live, token.token));
    const Json hello = wait_hello(client);
    client.send(request.dump());
    Json event;
    const Json answer = await_answer(client, id, then, event);
    client.close();
    if (answer.value("type", "") == "error") {
      std::string message = answer.value("message", "");
      if (answer.value("code", "") == "forbidden" && token.token.empty()) {
        message += " (connected as " + hello.value("role", std::string("observer")) +
                   ": give the role's token with --token-file FILE, or --token)";
      }
      std::fprintf(stderr, "pitchwire %s: the daemon refused: %s: %s\n", cmd.c_str(),
                   answer.value("code", "").c_str(), message.c_str());
      return 3;
    }
    // What took effect, as the daemon announced it to everyone.
    std::puts((event.is_null() ? answer : event).dump(cmd == "exercise" && w[0] == "end" ? 2 : -1).c_str());
    return 0;
  } catch (const LiveError& e) {
    std::fprintf(stderr, "pitchwire %s: %s\n", cmd.c_str(), e.what());
    return 1;
  }
}

}  // namespace pitchwire::cli
