// config.cpp: the daemon's settings (see config.h): the input spec, range checks, the JSON-with-comments
// file, the XDG default locations and the command line.
//
// Every limit lives once, in the Limits constants below, and is used by validate(), by the file reader and
// by the flags, so that a value gets the same verdict and the same wording wherever it comes from. Messages
// are one line: "<key> = <value>: allowed <what>" (a flag reads "--flag <value>: allowed <what>").
//
// Thread contract: pure functions over values, called from the main thread before anything starts (the
// environment is read with getenv, the password database with the reentrant getpwuid_r).
#include "pitchwire/daemon/config.h"

#include <arpa/inet.h>
#include <pwd.h>
#include <unistd.h>

#include <CLI/CLI.hpp>
#include <nlohmann/json.hpp>

#include <algorithm>
#include <array>
#include <cctype>
#include <cerrno>
#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <memory>
#include <string_view>
#include <system_error>
#include <type_traits>
#include <utility>

#include "pitchwire/dsp/pitch_tracker.h"

#ifndef PITCHWIRE_VERSION
#define PITCHWIRE_VERSION "unknown"
#endif

namespace pitchwire::daemon {
namespace {

namespace fs = std::filesystem;
using OrderedJson = nlohmann::ordered_json;

constexpr std::string_view kProgram = "pitchwired";
constexpr std::string_view kInputForms = "expected demo, device, device:NAME or file:PATH";
constexpr std::array<std::string_view, 6> kLogLevels = {"trace", "debug", "info", "warn", "error", "off"};
// A configuration file is a few kilobytes; a cap keeps a mistaken path (a log, /dev/zero) from being
// read into memory whole.
constexpr std::size_t kMaxFileBytes = 1024 * 1024;

// ---- text helpers --------------------------------------------------------------------------------------

// Shortest text that reads back as the same double ("12", "2.5", "0.1").
std::string format_number(double value) {
  if (std::isnan(value)) return "nan";
  if (std::isinf(value)) return value > 0 ? "inf" : "-inf";
  std::array<char, 64> buffer{};
  const auto result = std::to_chars(buffer.data(), buffer.data() + buffer.size(), value);
  return std::string(buffer.data(), result.ptr);
}

// A string as a JSON literal: quoted, with control characters escaped, so that a message stays one line.
std::string quote(std::string_view text) {
  return OrderedJson(std::string(text)).dump(-1, ' ', false, OrderedJson::error_handler_t::replace);
}

// A JSON value for a message: compact, and cut short so that a large array does not flood the log.
std::string show(const OrderedJson& value) {
  constexpr std::size_t kMaxChars = 60;
  std::string text = value.dump(-1, ' ', false, OrderedJson::error_handler_t::replace);
  if (text.size() > kMaxChars) text = text.substr(0, kMaxChars) + "...";
  return text;
}

// "hop_ms = 12" for a key, "--hop-ms 12" for a flag.
struct Subject {
  std::string_view name;
  bool is_flag = false;
  [[nodiscard]] std::string with(std::string_view value_text) const {
    return std::string(name) + (is_flag ? " " : " = ") + std::string(value_text);
  }
};

[[noreturn]] void fail_allowed(const Subject& subject, std::string_view value_text, std::string_view allowed) {
  throw ConfigError(subject.with(value_text) + ": allowed " + std::string(allowed));
}

// ---- limits --------------------------------------------------------------------------------------------

struct Limits {
  double min = 0;
  double max = 0;
  const char* allowed = nullptr;  // wording when "min to max" does not say it all

  [[nodiscard]] std::string text() const {
    return allowed != nullptr ? std::string(allowed) : format_number(min) + " to " + format_number(max);
  }
  [[nodiscard]] bool contains(double value) const { return value >= min && value <= max; }  // false for NaN
};

// The estimator limits mirror dsp::TrackerConfig::validate() (f0_min_hz at most 500, f0_max_hz more than
// 1.5 x f0_min_hz): a configuration accepted here must be accepted by the tracker.
constexpr Limits kSampleRate{8000, 96000, "a whole number of Hz from 8000 to 96000"};
constexpr Limits kBufferFrames{16, 8192};
constexpr Limits kChannel{0, 64, "0 (the mixdown of all channels) or 1 to 64"};
constexpr Limits kRingSeconds{0.1, 30};
constexpr Limits kHopMs{2.5, 10};
constexpr Limits kSettleMs{0, 500};
constexpr Limits kF0Min{30, 500};
constexpr Limits kF0Max{30, 2000};
constexpr Limits kReference{20, 2000};
constexpr Limits kPort{0, 65535, "0 (any free port) to 65535"};
constexpr Limits kMaxClients{1, 10000};
constexpr Limits kMaxMessageBytes{256, 65536};
constexpr Limits kQueueFrames{4, 4096};
constexpr Limits kSlowClient{1, 600};
constexpr Limits kRequestsPerS{1, 1000};
constexpr Limits kRequestBurst{1, 10000};
constexpr Limits kStatsInterval{0.1, 60};
constexpr Limits kStatsWindow{0.5, 600};
constexpr Limits kBandDwell{0, 5};
constexpr Limits kStabilityWindow{0.2, 600};
constexpr Limits kSplOffset{0, 200, "null (not calibrated) or 0 to 200 dB"};
constexpr Limits kDoseVoiced{1, 86400, "null (no limit) or 1 to 86400 s"};
constexpr Limits kDoseCycles{1, 1e9, "null (no limit) or 1 to 1e9 cycles"};
constexpr double kF0RatioMin = 1.5;   // f0_max_hz must exceed this times f0_min_hz (the tracker's rule)
constexpr double kRingBuffersMin = 2;  // the ring holds at least this many device buffers

constexpr std::string_view kBindAllowed =
    "an IPv4 or IPv6 address literal without brackets, such as 127.0.0.1, ::1, 0.0.0.0 or ::";

void check_number(const Subject& subject, double value, const Limits& limits) {
  if (!limits.contains(value)) fail_allowed(subject, format_number(value), limits.text());
}

template <class T>
void check_integer(const Subject& subject, T value, const Limits& limits) {
  if (std::cmp_less(value, static_cast<std::int64_t>(limits.min)) ||
      std::cmp_greater(value, static_cast<std::int64_t>(limits.max))) {
    fail_allowed(subject, std::to_string(value), limits.text());
  }
}

void check_sample_rate(const Subject& subject, double value) {
  if (!kSampleRate.contains(value) || value != std::floor(value)) {
    fail_allowed(subject, format_number(value), kSampleRate.text());
  }
}

void check_bind(const Subject& subject, const std::string& value) {
  in_addr v4{};
  in6_addr v6{};
  if (::inet_pton(AF_INET, value.c_str(), &v4) == 1 || ::inet_pton(AF_INET6, value.c_str(), &v6) == 1) return;
  fail_allowed(subject, quote(value), kBindAllowed);
}

// 127.0.0.0/8 and ::1 (and ::ffff:127.x): addresses no other machine can reach.
bool is_loopback(const std::string& value) {
  in_addr v4{};
  in6_addr v6{};
  if (::inet_pton(AF_INET, value.c_str(), &v4) == 1) return (ntohl(v4.s_addr) >> 24) == 127;
  if (::inet_pton(AF_INET6, value.c_str(), &v6) == 1) {
    if (IN6_IS_ADDR_LOOPBACK(&v6)) return true;
    return IN6_IS_ADDR_V4MAPPED(&v6) && v6.s6_addr[12] == 127;
  }
  return false;
}

void check_log_level(const Subject& subject, const std::string& value) {
  if (std::find(kLogLevels.begin(), kLogLevels.end(), value) != kLogLevels.end()) return;
  fail_allowed(subject, quote(value), "trace, debug, info, warn, error or off");
}

void check_path(const Subject& subject, const std::string& value) {
  // A NUL would silently cut the path short at the first system call.
  if (value.find('\0') != std::string::npos) {
    throw ConfigError(subject.with(quote(value)) + ": a path cannot contain a NUL character");
  }
}

InputSpec parse_input_as(const Subject& subject, const std::string& text) {
  const auto colon = text.find(':');
  const std::string_view kind = std::string_view(text).substr(0, colon);
  const std::string argument = colon == std::string::npos ? std::string() : text.substr(colon + 1);
  InputSpec spec;
  if (kind == "demo" && colon == std::string::npos) {
    spec.kind = InputSpec::Kind::kDemo;
    return spec;
  }
  if (kind == "device" && (colon == std::string::npos || !argument.empty())) {
    // The name keeps any further colons: ALSA names look like "hw:1,0".
    spec.kind = InputSpec::Kind::kDevice;
    spec.argument = argument;
    return spec;
  }
  if (kind == "file" && colon != std::string::npos && !argument.empty()) {
    check_path(subject, argument);
    spec.kind = InputSpec::Kind::kFile;
    spec.argument = argument;
    return spec;
  }
  const std::string head = std::string(subject.name) + " ";
  if ((kind == "device" || kind == "file") && colon != std::string::npos && argument.empty()) {
    throw ConfigError(head + quote(text) + ": the " + (kind == "file" ? "path" : "device name") +
                      " after the colon is empty; " + std::string(kInputForms));
  }
  throw ConfigError(head + quote(text) + ": " + std::string(kInputForms));
}

// ---- the configuration file ----------------------------------------------------------------------------

// The keys of the file, in the order of DaemonConfig (and of to_json_text and config/pitchwired.jsonc).
constexpr std::array<std::string_view, 36> kKeys = {
    "input", "sample_rate_hz", "buffer_frames", "channel", "loop", "ring_s",                      // audio
    "hop_ms", "settle_ms", "f0_min_hz", "f0_max_hz", "hum_cancel", "reference_hz",               // estimator
    "bind", "allow_remote", "port", "web_root", "max_clients", "max_message_bytes", "queue_frames",              // server
    "slow_client_s", "requests_per_s", "request_burst", "stats_interval_s", "stats_window_s",
    "band_dwell_s", "stability_window_s",
    "spl_offset_db", "dose_limit_voiced_s", "dose_limit_cycles",                                  // measures
    "log_level", "log_file", "token_dir", "record_sessions", "session_dir",
    "exercises_file", "record_audio"};                                        // files

std::string lower(std::string_view text) {
  std::string out(text);
  for (char& c : out) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return out;
}

// Optimal string alignment distance: Levenshtein plus the swap of two neighbours ("prot" -> "port"),
// the commonest typing slip.
std::size_t edit_distance(std::string_view a, std::string_view b) {
  const std::size_t n = a.size();
  const std::size_t m = b.size();
  std::vector<std::vector<std::size_t>> d(n + 1, std::vector<std::size_t>(m + 1, 0));
  for (std::size_t i = 0; i <= n; ++i) d[i][0] = i;
  for (std::size_t j = 0; j <= m; ++j) d[0][j] = j;
  for (std::size_t i = 1; i <= n; ++i) {
    for (std::size_t j = 1; j <= m; ++j) {
      const std::size_t cost = a[i - 1] == b[j - 1] ? 0 : 1;
      d[i][j] = std::min({d[i - 1][j] + 1, d[i][j - 1] + 1, d[i - 1][j - 1] + cost});
      if (i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1]) {
        d[i][j] = std::min(d[i][j], d[i - 2][j - 2] + 1);
      }
    }
  }
  return d[n][m];
}

std::string unknown_key_message(const std::string& key) {
  constexpr std::size_t kMaxSuggestDistance = 2;
  const std::string wanted = lower(key);
  std::string_view best;
  std::size_t best_distance = kMaxSuggestDistance + 1;
  for (const std::string_view known : kKeys) {
    const std::size_t distance = edit_distance(wanted, known);
    if (distance < best_distance) {
      best = known;
      best_distance = distance;
    }
  }
  std::string message = "unknown key " + quote(key);
  if (!best.empty()) message += "; did you mean " + quote(best) + "?";
  return message;
}

std::string json_type_name(const OrderedJson& value) {
  if (value.is_null()) return "null";
  if (value.is_boolean()) return "a boolean";
  if (value.is_number()) return "a number";
  if (value.is_string()) return "a string";
  if (value.is_array()) return "an array";
  return "an object";
}

// Reads the members of the top-level object into a DaemonConfig. Each value is checked against the same
// limits as validate(), so that a file gets a range error naming its key even where the struct's type
// could not hold the value (a port of 1e20).
class FileReader {
 public:
  explicit FileReader(fs::path folder) : folder_(std::move(folder)) {}

  void read(const std::string& key, const OrderedJson& value, DaemonConfig& config) const {
    const Subject s{key, false};
    if (key == "input") {
      config.input = parse_input_as(s, text_value(key, value));
      if (config.input.kind == InputSpec::Kind::kFile) config.input.argument = resolve(config.input.argument).string();
    } else if (key == "sample_rate_hz") {
      config.sample_rate_hz = number(key, value);
      check_sample_rate(s, config.sample_rate_hz);
    } else if (key == "buffer_frames") {
      config.buffer_frames = static_cast<unsigned>(integer(key, value, kBufferFrames));
    } else if (key == "channel") {
      config.channel = static_cast<int>(integer(key, value, kChannel));
    } else if (key == "loop") {
      config.loop = boolean(key, value);
    } else if (key == "ring_s") {
      config.ring_s = number(key, value, kRingSeconds);
    } else if (key == "hop_ms") {
      config.hop_ms = number(key, value, kHopMs);
    } else if (key == "settle_ms") {
      config.settle_ms = number(key, value, kSettleMs);
    } else if (key == "f0_min_hz") {
      config.f0_min_hz = number(key, value, kF0Min);
    } else if (key == "f0_max_hz") {
      config.f0_max_hz = number(key, value, kF0Max);
    } else if (key == "hum_cancel") {
      config.hum_cancel = boolean(key, value);
    } else if (key == "reference_hz") {
      config.reference_hz = number(key, value, kReference);
    } else if (key == "bind") {
      config.bind = text_value(key, value);
      check_bind(s, config.bind);
    } else if (key == "allow_remote") {
      config.allow_remote = boolean(key, value);
    } else if (key == "port") {
      config.port = static_cast<int>(integer(key, value, kPort));
    } else if (key == "web_root") {
      config.web_root = path_value(key, value);
    } else if (key == "max_clients") {
      config.max_clients = static_cast<int>(integer(key, value, kMaxClients));
    } else if (key == "max_message_bytes") {
      config.max_message_bytes = static_cast<std::size_t>(integer(key, value, kMaxMessageBytes));
    } else if (key == "queue_frames") {
      config.queue_frames = static_cast<std::size_t>(integer(key, value, kQueueFrames));
    } else if (key == "slow_client_s") {
      config.slow_client_s = number(key, value, kSlowClient);
    } else if (key == "requests_per_s") {
      config.requests_per_s = number(key, value, kRequestsPerS);
    } else if (key == "request_burst") {
      config.request_burst = number(key, value, kRequestBurst);
    } else if (key == "stats_interval_s") {
      config.stats_interval_s = number(key, value, kStatsInterval);
    } else if (key == "stats_window_s") {
      config.stats_window_s = number(key, value, kStatsWindow);
    } else if (key == "band_dwell_s") {
      config.band_dwell_s = number(key, value, kBandDwell);
    } else if (key == "stability_window_s") {
      config.stability_window_s = number(key, value, kStabilityWindow);
    } else if (key == "spl_offset_db") {
      config.spl_offset_db = optional_number(key, value, kSplOffset);
    } else if (key == "dose_limit_voiced_s") {
      config.dose_limit_voiced_s = optional_number(key, value, kDoseVoiced);
    } else if (key == "dose_limit_cycles") {
      config.dose_limit_cycles = optional_number(key, value, kDoseCycles);
    } else if (key == "log_level") {
      config.log_level = text_value(key, value);
      check_log_level(s, config.log_level);
    } else if (key == "log_file") {
      config.log_file = path_value(key, value);
    } else if (key == "token_dir") {
      config.token_dir = path_value(key, value);
    } else if (key == "record_sessions") {
      config.record_sessions = boolean(key, value);
    } else if (key == "session_dir") {
      config.session_dir = path_value(key, value);
    } else if (key == "exercises_file") {
      config.exercises_file = path_value(key, value);
    } else if (key == "record_audio") {
      config.record_audio = boolean(key, value);
    } else {
      throw ConfigError(unknown_key_message(key));
    }
  }

 private:
  [[noreturn]] static void fail_type(const std::string& key, const char* expected, const OrderedJson& value) {
    throw ConfigError(key + ": expected " + expected + ", got " + show(value));
  }

  static double number(const std::string& key, const OrderedJson& value) {
    if (!value.is_number()) fail_type(key, "a number", value);
    return value.get<double>();
  }
  static double number(const std::string& key, const OrderedJson& value, const Limits& limits) {
    const double result = number(key, value);
    check_number(Subject{key, false}, result, limits);
    return result;
  }
  // null: not set.
  static std::optional<double> optional_number(const std::string& key, const OrderedJson& value,
                                               const Limits& limits) {
    if (value.is_null()) return std::nullopt;
    if (!value.is_number()) fail_type(key, "a number or null", value);
    return number(key, value, limits);
  }

  // An integer checked against limits before it is narrowed. A float with a whole value (1e3) counts:
  // JSON does not tell integers apart, and some writers print every number with an exponent.
  static std::int64_t integer(const std::string& key, const OrderedJson& value, const Limits& limits) {
    std::int64_t result = 0;
    if (value.is_number_unsigned()) {
      const auto u = value.get<std::uint64_t>();
      if (u > static_cast<std::uint64_t>(std::numeric_limits<std::int64_t>::max())) {
        fail_allowed(Subject{key, false}, std::to_string(u), limits.text());
      }
      result = static_cast<std::int64_t>(u);
    } else if (value.is_number_integer()) {
      result = value.get<std::int64_t>();
    } else if (value.is_number_float()) {
      const auto d = value.get<double>();
      if (std::isfinite(d) && d != std::floor(d)) fail_type(key, "an integer", value);
      // Beyond 2^53 (or infinite, from an overflowing literal) the value is out of every range anyway.
      if (!(std::fabs(d) <= 9007199254740992.0)) fail_allowed(Subject{key, false}, format_number(d), limits.text());
      result = static_cast<std::int64_t>(d);
    } else {
      fail_type(key, "an integer", value);
    }
    check_integer(Subject{key, false}, result, limits);
    return result;
  }

  static bool boolean(const std::string& key, const OrderedJson& value) {
    if (!value.is_boolean()) fail_type(key, "true or false", value);
    return value.get<bool>();
  }

  static std::string text_value(const std::string& key, const OrderedJson& value) {
    if (!value.is_string()) fail_type(key, "a string", value);
    return value.get<std::string>();
  }

  [[nodiscard]] fs::path path_value(const std::string& key, const OrderedJson& value) const {
    const std::string text = text_value(key, value);
    check_path(Subject{key, false}, text);
    return resolve(text);
  }

  // Relative paths in a file are taken from the file's folder, so that a file and the things it names
  // can be moved together and the result does not depend on the daemon's working directory.
  [[nodiscard]] fs::path resolve(const fs::path& p) const {
    if (p.empty() || p.is_absolute() || folder_.empty()) return p;
    return (folder_ / p).lexically_normal();
  }

  fs::path folder_;
};

// Line and column (1-based, the column in characters of UTF-8) of the character at byte `index`.
std::pair<std::size_t, std::size_t> line_and_column(std::string_view text, std::size_t index) {
  index = std::min(index, text.size());
  std::size_t line = 1;
  std::size_t line_start = 0;
  for (std::size_t i = 0; i < index; ++i) {
    if (text[i] == '\n') {
      ++line;
      line_start = i + 1;
    }
  }
  std::size_t column = 1;
  for (std::size_t i = line_start; i < index; ++i) {
    if ((static_cast<unsigned char>(text[i]) & 0xC0) != 0x80) ++column;  // skip UTF-8 continuation bytes
  }
  return {line, column};
}

// nlohmann reports the last character it read: the end of the offending token. A reader looks for its
// start ("hop_ms" after a missing comma, "tx" for a misspelt true), so the position is moved back over a
// complete string or a word.
std::size_t token_start(std::string_view text, std::size_t index) {
  if (index >= text.size()) return index;
  const auto is_word = [](char c) {
    return std::isalnum(static_cast<unsigned char>(c)) != 0 || c == '.' || c == '+' || c == '-';
  };
  if (text[index] == '"') {
    for (std::size_t i = index; i-- > 0 && text[i] != '\n';) {  // a string never spans lines
      if (text[i] != '"') continue;
      std::size_t backslashes = 0;
      while (backslashes < i && text[i - 1 - backslashes] == '\\') ++backslashes;
      if (backslashes % 2 == 0) return i;
    }
    return index;
  }
  while (index > 0 && is_word(text[index]) && is_word(text[index - 1])) --index;
  return index;
}

// nlohmann's message without its "[json.exception...] parse error at line L, column C: " prefix.
std::string parse_error_what(const nlohmann::json::parse_error& e) {
  const std::string what = e.what();
  const auto at = what.find("parse error");
  if (at != std::string::npos) {
    const auto colon = what.find(": ", at);
    if (colon != std::string::npos) return what.substr(colon + 2);
  }
  return what;
}

// The limits of a numeric key, or nullptr.
const Limits* limits_of(std::string_view key) {
  static constexpr std::array<std::pair<std::string_view, const Limits*>, 23> kNumeric = {{
      {"sample_rate_hz", &kSampleRate}, {"buffer_frames", &kBufferFrames}, {"channel", &kChannel},
      {"ring_s", &kRingSeconds}, {"hop_ms", &kHopMs}, {"settle_ms", &kSettleMs}, {"f0_min_hz", &kF0Min},
      {"f0_max_hz", &kF0Max}, {"reference_hz", &kReference}, {"port", &kPort}, {"max_clients", &kMaxClients},
      {"max_message_bytes", &kMaxMessageBytes}, {"queue_frames", &kQueueFrames}, {"slow_client_s", &kSlowClient},
      {"requests_per_s", &kRequestsPerS}, {"request_burst", &kRequestBurst},
      {"stats_interval_s", &kStatsInterval}, {"stats_window_s", &kStatsWindow},
      {"band_dwell_s", &kBandDwell}, {"stability_window_s", &kStabilityWindow}, {"spl_offset_db", &kSplOffset},
      {"dose_limit_voiced_s", &kDoseVoiced}, {"dose_limit_cycles", &kDoseCycles},
  }};
  for (const auto& [name, limits] : kNumeric) {
    if (name == key) return limits;
  }
  return nullptr;
}

// nlohmann's "number overflow parsing '1e400'" as a range error of the key it was the value of (empty when
// it was not directly a top-level member).
std::string overflow_message(const std::string& key, const nlohmann::json::out_of_range& e) {
  const std::string what = e.what();
  const auto first = what.find('\'');
  const auto last = what.rfind('\'');
  const std::string literal = first != std::string::npos && last > first ? what.substr(first + 1, last - first - 1)
                                                                        : std::string("a number");
  if (key.empty()) return "the number " + literal + " is too large";
  if (std::find(kKeys.begin(), kKeys.end(), key) == kKeys.end()) return unknown_key_message(key);
  if (const Limits* limits = limits_of(key)) return key + " = " + literal + ": allowed " + limits->text();
  return key + ": the number " + literal + " is too large";
}

std::string read_file_text(const fs::path& path) {
  const std::string name = path.string();
  errno = 0;
  std::unique_ptr<std::FILE, int (*)(std::FILE*)> file(std::fopen(name.c_str(), "rb"), &std::fclose);
  if (!file) {
    const int error = errno;
    if (error == ENOENT) throw ConfigError(name + ": no such file");
    throw ConfigError(name + ": cannot read: " + std::strerror(error));
  }
  std::string text;
  std::array<char, 8192> buffer{};
  while (true) {
    const std::size_t got = std::fread(buffer.data(), 1, buffer.size(), file.get());
    text.append(buffer.data(), got);
    if (text.size() > kMaxFileBytes) {
      throw ConfigError(name + ": larger than " + std::to_string(kMaxFileBytes / 1024) +
                        " KiB, too large for a configuration file");
    }
    if (got < buffer.size()) {
      if (std::ferror(file.get()) != 0) {
        throw ConfigError(name + ": cannot read: " + std::strerror(errno != 0 ? errno : EIO));
      }
      break;
    }
  }
  return text;
}

bool is_blank(std::string_view text) {
  if (text.substr(0, 3) == "\xEF\xBB\xBF") text.remove_prefix(3);  // a UTF-8 byte order mark
  return std::all_of(text.begin(), text.end(), [](char c) { return c == ' ' || c == '\t' || c == '\n' || c == '\r'; });
}

// ---- environment ----------------------------------------------------------------------------------------

std::optional<fs::path> home_from_passwd() {
  long size = ::sysconf(_SC_GETPW_R_SIZE_MAX);
  if (size <= 0) size = 16384;
  std::vector<char> buffer(static_cast<std::size_t>(size));
  passwd entry{};
  passwd* found = nullptr;
  if (::getpwuid_r(::getuid(), &entry, buffer.data(), buffer.size(), &found) != 0 || found == nullptr ||
      found->pw_dir == nullptr || found->pw_dir[0] == '\0') {
    return std::nullopt;
  }
  return fs::path(found->pw_dir);
}

fs::path home_dir() {
  const char* home = std::getenv("HOME");
  if (home != nullptr && fs::path(home).is_absolute()) return home;
  if (auto from_passwd = home_from_passwd()) return *from_passwd;
  throw ConfigError("cannot find the home directory: HOME is not set and user " + std::to_string(::getuid()) +
                    " has no entry in the password database");
}

// The XDG Base Directory rule: the variable when it is set to an absolute path (relative values are
// invalid and ignored), else the fallback under the home directory.
fs::path xdg_dir(const char* variable, const char* fallback_under_home) {
  const char* value = std::getenv(variable);
  if (value != nullptr && fs::path(value).is_absolute()) return value;
  return home_dir() / fallback_under_home;
}

// ---- command line ---------------------------------------------------------------------------------------

std::string with_default(std::string text, std::string_view default_text) {
  return text + " (default " + std::string(default_text) + ")";
}

// A number flag, checked against its limits; messages quote the text as typed ("--hop-ms 1e400").
double flag_number(const Subject& subject, const std::string& text, const Limits& limits, bool whole = false) {
  double value = 0;
  const auto result = std::from_chars(text.data(), text.data() + text.size(), value);
  const bool complete = result.ptr == text.data() + text.size() && !text.empty();
  if (result.ec == std::errc::result_out_of_range && complete) fail_allowed(subject, text, limits.text());
  if (result.ec != std::errc() || !complete) throw ConfigError(subject.with(quote(text)) + ": expected a number");
  if (!limits.contains(value) || (whole && value != std::floor(value))) fail_allowed(subject, text, limits.text());
  return value;
}

std::int64_t flag_integer(const Subject& subject, const std::string& text, const Limits& limits) {
  std::int64_t value = 0;
  const auto result = std::from_chars(text.data(), text.data() + text.size(), value);
  if (result.ec == std::errc::result_out_of_range && result.ptr == text.data() + text.size()) {
    fail_allowed(subject, text, limits.text());
  }
  if (result.ec != std::errc() || result.ptr != text.data() + text.size()) {
    throw ConfigError(subject.with(quote(text)) + ": expected an integer");
  }
  check_integer(subject, value, limits);
  return value;
}

std::string one_line(std::string text) {
  std::replace(text.begin(), text.end(), '\n', ' ');
  while (!text.empty() && text.back() == ' ') text.pop_back();
  return text;
}

// The flags as written (applied after the file). Numbers are taken as text and converted here, so that
// their errors read like the file's.
struct Flags {
  std::string config, input, bind, web_root, log_level, log_file;
  std::string port, channel, sample_rate, buffer_frames, hop_ms, settle_ms, f0_min, f0_max;
  bool no_hum_cancel = false;
  bool no_loop = false;
  bool record_audio = false;
  bool audio_consent = false;
  bool allow_remote = false;
};

void apply_flags(const CLI::App& app, const Flags& f, DaemonConfig& config) {
  auto given = [&app](const char* name) { return app.get_option(name)->count() > 0; };
  auto number = [&](const char* name, const std::string& text, double& out, const Limits& limits) {
    if (!given(name)) return;
    out = flag_number(Subject{name, true}, text, limits);
  };
  auto integer = [&](const char* name, const std::string& text, auto& out, const Limits& limits) {
    if (!given(name)) return;
    out = static_cast<std::remove_reference_t<decltype(out)>>(flag_integer(Subject{name, true}, text, limits));
  };
  if (given("--input")) config.input = parse_input_as(Subject{"--input", true}, f.input);
  if (given("--sample-rate")) {
    config.sample_rate_hz = flag_number(Subject{"--sample-rate", true}, f.sample_rate, kSampleRate, /*whole=*/true);
  }
  integer("--buffer-frames", f.buffer_frames, config.buffer_frames, kBufferFrames);
  integer("--channel", f.channel, config.channel, kChannel);
  if (f.no_loop) config.loop = false;
  number("--hop-ms", f.hop_ms, config.hop_ms, kHopMs);
  number("--settle-ms", f.settle_ms, config.settle_ms, kSettleMs);
  number("--f0-min", f.f0_min, config.f0_min_hz, kF0Min);
  number("--f0-max", f.f0_max, config.f0_max_hz, kF0Max);
  if (f.no_hum_cancel) config.hum_cancel = false;
  if (given("--bind")) {
    check_bind(Subject{"--bind", true}, f.bind);
    config.bind = f.bind;
  }
  integer("--port", f.port, config.port, kPort);
  if (given("--web-root")) {
    check_path(Subject{"--web-root", true}, f.web_root);
    config.web_root = f.web_root;
  }
  if (given("--log-level")) {
    check_log_level(Subject{"--log-level", true}, f.log_level);
    config.log_level = f.log_level;
  }
  if (given("--log-file")) {
    check_path(Subject{"--log-file", true}, f.log_file);
    config.log_file = f.log_file;
  }
  if (f.record_audio) config.record_audio = true;
  if (f.allow_remote) config.allow_remote = true;
  config.audio_consent = f.audio_consent;
}

}  // namespace

// ---- InputSpec ------------------------------------------------------------------------------------------

std::string InputSpec::text() const {
  switch (kind) {
    case Kind::kDemo:
      return "demo";
    case Kind::kDevice:
      return argument.empty() ? "device" : "device:" + argument;
    case Kind::kFile:
      return "file:" + argument;
  }
  return "demo";
}

InputSpec parse_input(const std::string& text) { return parse_input_as(Subject{"input", false}, text); }

// ---- DaemonConfig ---------------------------------------------------------------------------------------

void DaemonConfig::validate() const {
  auto key = [](std::string_view name) { return Subject{name, false}; };
  if (input.kind == InputSpec::Kind::kFile && input.argument.empty()) {
    throw ConfigError("input " + quote(input.text()) + ": the path after the colon is empty; " +
                      std::string(kInputForms));
  }
  check_sample_rate(key("sample_rate_hz"), sample_rate_hz);
  check_integer(key("buffer_frames"), buffer_frames, kBufferFrames);
  check_integer(key("channel"), channel, kChannel);
  check_number(key("ring_s"), ring_s, kRingSeconds);
  check_number(key("hop_ms"), hop_ms, kHopMs);
  check_number(key("settle_ms"), settle_ms, kSettleMs);
  check_number(key("f0_min_hz"), f0_min_hz, kF0Min);
  check_number(key("f0_max_hz"), f0_max_hz, kF0Max);
  check_number(key("reference_hz"), reference_hz, kReference);
  check_bind(key("bind"), bind);
  check_integer(key("port"), port, kPort);
  check_integer(key("max_clients"), max_clients, kMaxClients);
  check_integer(key("max_message_bytes"), max_message_bytes, kMaxMessageBytes);
  check_integer(key("queue_frames"), queue_frames, kQueueFrames);
  check_number(key("slow_client_s"), slow_client_s, kSlowClient);
  check_number(key("requests_per_s"), requests_per_s, kRequestsPerS);
  check_number(key("request_burst"), request_burst, kRequestBurst);
  check_number(key("stats_interval_s"), stats_interval_s, kStatsInterval);
  check_number(key("stats_window_s"), stats_window_s, kStatsWindow);
  check_number(key("band_dwell_s"), band_dwell_s, kBandDwell);
  check_number(key("stability_window_s"), stability_window_s, kStabilityWindow);
  if (spl_offset_db) check_number(key("spl_offset_db"), *spl_offset_db, kSplOffset);
  if (dose_limit_voiced_s) check_number(key("dose_limit_voiced_s"), *dose_limit_voiced_s, kDoseVoiced);
  if (dose_limit_cycles) check_number(key("dose_limit_cycles"), *dose_limit_cycles, kDoseCycles);
  check_log_level(key("log_level"), log_level);
  check_path(key("web_root"), web_root.string());
  check_path(key("log_file"), log_file.string());
  check_path(key("token_dir"), token_dir.string());
  check_path(key("session_dir"), session_dir.string());
  check_path(key("exercises_file"), exercises_file.string());

  // Settings that depend on each other.
  if (!allow_remote && !is_loopback(bind)) {
    throw ConfigError("bind " + quote(bind) +
                      " listens beyond this machine: add --allow-remote (\"allow_remote\": true) to mean it; every "
                      "client then needs a token (docs/daemon.md, \"Listening beyond this machine\")");
  }
  if (record_audio && !audio_consent) {
    throw ConfigError(
        "record_audio is true but --audio-consent was not given: keeping a recording of a voice needs the "
        "speaker's explicit consent, given on the command line for each run (docs/sessions.md)");
  }
  if (!(f0_max_hz > kF0RatioMin * f0_min_hz)) {
    fail_allowed(key("f0_max_hz"), format_number(f0_max_hz),
                 "more than 1.5 x f0_min_hz (" + format_number(f0_min_hz) + " Hz), at most 2000");
  }
  // The source writes buffer_frames at a time: a ring that cannot hold two blocks loses audio on every
  // block the analysis thread is a moment late for.
  const double ring_samples = ring_s * sample_rate_hz;
  if (ring_samples < kRingBuffersMin * buffer_frames) {
    fail_allowed(key("ring_s"), format_number(ring_s),
                 "at least 2 x buffer_frames (" + std::to_string(buffer_frames) + ") at sample_rate_hz (" +
                     format_number(sample_rate_hz) + "), that is " +
                     format_number(kRingBuffersMin * buffer_frames / sample_rate_hz) + " s, up to 30");
  }

  // Belt and braces: whatever the tracker would refuse is refused here, before anything starts.
  dsp::TrackerConfig tracker;
  tracker.sample_rate_hz = sample_rate_hz;
  tracker.hop_ms = hop_ms;
  tracker.f0_min_hz = f0_min_hz;
  tracker.f0_max_hz = f0_max_hz;
  tracker.settle_ms = settle_ms;
  tracker.hum_cancel = hum_cancel;
  if (std::string problem = tracker.validate(); !problem.empty()) throw ConfigError(problem);
}

// ---- the file -------------------------------------------------------------------------------------------

DaemonConfig load_config_file(const fs::path& path, DaemonConfig base) {
  const std::string name = path.string();
  const std::string text = read_file_text(path);
  if (is_blank(text)) {
    throw ConfigError(name + ": the file is empty; it must hold one JSON object ({} keeps every default)");
  }

  // Duplicate top-level keys are reported: with two "port" members only one would take effect. The last
  // key and the nesting are followed too, to name the key of a number too large to parse.
  std::optional<std::string> duplicate;
  std::vector<std::string> seen;
  std::string last_key;
  int open_containers = 0;
  const OrderedJson::parser_callback_t watch_keys = [&](int depth, OrderedJson::parse_event_t event,
                                                        OrderedJson& parsed) {
    using Event = OrderedJson::parse_event_t;
    if (event == Event::object_start || event == Event::array_start) ++open_containers;
    if (event == Event::object_end || event == Event::array_end) --open_containers;
    if (event == Event::key && depth == 1 && parsed.is_string()) {
      last_key = parsed.get<std::string>();
      if (std::find(seen.begin(), seen.end(), last_key) != seen.end()) {
        if (!duplicate) duplicate = last_key;
      } else {
        seen.push_back(last_key);
      }
    }
    return true;
  };

  OrderedJson document;
  try {
    document = OrderedJson::parse(text, watch_keys, /*allow_exceptions=*/true, /*ignore_comments=*/true);
  } catch (const nlohmann::json::parse_error& e) {
    // e.byte counts the characters read, so the offending one is at index byte - 1.
    const auto [line, column] = line_and_column(text, token_start(text, e.byte > 0 ? e.byte - 1 : 0));
    throw ConfigError(name + ": line " + std::to_string(line) + ", column " + std::to_string(column) + ": " +
                      parse_error_what(e));
  } catch (const nlohmann::json::out_of_range& e) {
    // A number beyond the range of a double (1e400) stops the parser at once: it belongs to the last key.
    throw ConfigError(name + ": " + overflow_message(open_containers == 1 ? last_key : std::string(), e));
  }
  if (!document.is_object()) {
    throw ConfigError(name + ": expected a JSON object of settings ({\"port\": 7350, ...}), got " +
                      json_type_name(document));
  }
  if (duplicate) throw ConfigError(name + ": key " + quote(*duplicate) + " appears more than once");

  const FileReader reader(path.parent_path());
  try {
    for (const auto& [key, value] : document.items()) reader.read(key, value, base);
  } catch (const ConfigError& e) {
    throw ConfigError(name + ": " + e.what());
  }
  return base;
}

fs::path default_config_path() { return xdg_dir("XDG_CONFIG_HOME", ".config") / "pitchwire" / "pitchwired.jsonc"; }

fs::path default_state_dir() { return xdg_dir("XDG_STATE_HOME", ".local/state") / "pitchwire"; }

// ---- the command line -----------------------------------------------------------------------------------

CommandLine parse_command_line(int argc, const char* const* argv) {
  CommandLine result;
  const DaemonConfig defaults;
  std::string default_path_text = "$XDG_CONFIG_HOME/pitchwire/pitchwired.jsonc";
  try {
    default_path_text = default_config_path().string();
  } catch (const std::exception&) {
    // No home directory: the help names the path by its rule instead.
  }

  try {
    CLI::App app{"pitchwired: captures a voice, estimates its pitch (F0) live and streams it to WebSocket "
                 "subscribers; the URL to connect to is printed at start.",
                 std::string(kProgram)};
    app.option_defaults()->multi_option_policy(CLI::MultiOptionPolicy::TakeLast);  // the last flag wins
    app.set_help_flag("-h,--help", "Print this help and exit");
    app.set_version_flag("--version", std::string(kProgram) + " " + PITCHWIRE_VERSION, "Print the version and exit");
    app.footer("Settings come from built-in defaults, then the configuration file, then these flags. The file is " +
               default_path_text + " when it exists, or the one given with --config. Every key is described in "
               "docs/configuration.md.");

    Flags f;
    const char* kAudio = "Audio";
    const char* kEstimator = "Estimator";
    const char* kServer = "Server";
    const char* kFiles = "Configuration and logging";

    app.add_option("--input", f.input,
                   with_default("Audio source: demo (the built-in test voice), device (the default input), "
                                "device:NAME, or file:PATH (a sound file replayed in real time)",
                                defaults.input.text()))
        ->type_name("SOURCE")
        ->group(kAudio);
    app.add_flag("--list-devices", result.list_devices, "Print the audio input devices and exit")->group(kAudio);
    app.add_option("--sample-rate", f.sample_rate,
                   with_default("Device sample rate in Hz, 8000 to 96000", format_number(defaults.sample_rate_hz)))
        ->type_name("HZ")
        ->group(kAudio);
    app.add_option("--buffer-frames", f.buffer_frames,
                   with_default("Frames per device callback, 16 to 8192", std::to_string(defaults.buffer_frames)))
        ->type_name("N")
        ->group(kAudio);
    app.add_option("--channel", f.channel,
                   with_default("Input channel, 1 to 64, or 0 for the mixdown of all channels",
                                std::to_string(defaults.channel)))
        ->type_name("N")
        ->group(kAudio);
    app.add_flag("--no-loop", f.no_loop, "With file:PATH, stop at the end of the file instead of replaying it")
        ->group(kAudio);
    app.add_option("--hop-ms", f.hop_ms, with_default("Frame step in ms, 2.5 to 10", format_number(defaults.hop_ms)))
        ->type_name("MS")
        ->group(kEstimator);
    app.add_option("--settle-ms", f.settle_ms,
                   with_default("Delay of the settled value in ms, 0 to 500", format_number(defaults.settle_ms)))
        ->type_name("MS")
        ->group(kEstimator);
    app.add_option("--f0-min", f.f0_min,
                   with_default("Lowest F0 searched in Hz, 30 to 500", format_number(defaults.f0_min_hz)))
        ->type_name("HZ")
        ->group(kEstimator);
    app.add_option("--f0-max", f.f0_max,
                   with_default("Highest F0 searched in Hz, more than 1.5 x the lowest, at most 2000",
                                format_number(defaults.f0_max_hz)))
        ->type_name("HZ")
        ->group(kEstimator);
    app.add_flag("--no-hum-cancel", f.no_hum_cancel, "Do not cancel 50/60 Hz mains hum")->group(kEstimator);
    app.add_option("--bind", f.bind,
                   with_default("Address to listen on, an IPv4 or IPv6 literal; 0.0.0.0 or :: for every interface",
                                defaults.bind))
        ->type_name("ADDRESS")
        ->group(kServer);
    app.add_flag("--allow-remote", f.allow_remote,
                 "Let --bind name an address beyond this machine; every client then needs a token")
        ->group(kServer);
    app.add_option("--port", f.port,
                   with_default("TCP port, 0 to 65535; 0 picks a free one", std::to_string(defaults.port)))
        ->type_name("PORT")
        ->group(kServer);
    app.add_option("--web-root", f.web_root, "Folder the live page is served from (default: the built-in one)")
        ->type_name("DIR")
        ->group(kServer);
    app.add_option("--config", f.config, "Read settings from this file instead of the default one (it must exist)")
        ->type_name("FILE")
        ->group(kFiles);
    app.add_flag("--check-config", result.check_config, "Validate the settings, print them as JSON and exit")
        ->group(kFiles);
    app.add_option("--log-level", f.log_level,
                   with_default("Least severe messages logged: trace, debug, info, warn, error or off",
                                defaults.log_level))
        ->type_name("LEVEL")
        ->group(kFiles);
    app.add_option("--log-file", f.log_file, "Log file (default $XDG_STATE_HOME/pitchwire/pitchwired.log)")
        ->type_name("FILE")
        ->group(kFiles);
    app.add_flag("--record-audio", f.record_audio,
                 "Also keep the input as audio.wav in the session folder (needs --audio-consent)")
        ->group(kFiles);
    app.add_flag("--audio-consent", f.audio_consent,
                 "The speaker has given explicit consent to keeping a recording of their voice in this run")
        ->group(kFiles);

    try {
      app.parse(argc, argv);
    } catch (const CLI::CallForHelp&) {
      result.exit_code = 0;
      result.message = app.help();
      while (!result.message.empty() && result.message.back() == '\n') result.message.pop_back();
      return result;
    } catch (const CLI::CallForAllHelp&) {
      result.exit_code = 0;
      result.message = app.help();
      while (!result.message.empty() && result.message.back() == '\n') result.message.pop_back();
      return result;
    } catch (const CLI::CallForVersion& e) {
      result.exit_code = 0;
      result.message = e.what();
      return result;
    } catch (const CLI::ParseError& e) {
      result.exit_code = 2;
      result.message = std::string(kProgram) + ": " + one_line(e.what()) + " (see pitchwired --help)";
      return result;
    }

    DaemonConfig config;
    if (app.get_option("--config")->count() > 0) {
      if (f.config.empty()) throw ConfigError("--config: the file name is empty");
      config = load_config_file(f.config, config);
    } else {
      std::optional<fs::path> default_path;
      try {
        default_path = default_config_path();
      } catch (const ConfigError&) {
        // Without a home directory there is no default file; the defaults and flags still apply.
      }
      std::error_code ec;
      // symlink_status: a dangling link at the default place is a mistake worth reporting, not a
      // reason to fall back to the defaults silently.
      if (default_path && fs::exists(fs::symlink_status(*default_path, ec))) {
        config = load_config_file(*default_path, config);
      }
    }
    apply_flags(app, f, config);
    config.validate();
    result.config = std::move(config);
  } catch (const std::exception& e) {
    result.exit_code = 2;
    result.message = std::string(kProgram) + ": " + one_line(e.what());
  }
  return result;
}

std::string to_json_text(const DaemonConfig& config) {
  OrderedJson out = OrderedJson::object();
  out["input"] = config.input.text();
  out["sample_rate_hz"] = config.sample_rate_hz;
  out["buffer_frames"] = config.buffer_frames;
  out["channel"] = config.channel;
  out["loop"] = config.loop;
  out["ring_s"] = config.ring_s;
  out["hop_ms"] = config.hop_ms;
  out["settle_ms"] = config.settle_ms;
  out["f0_min_hz"] = config.f0_min_hz;
  out["f0_max_hz"] = config.f0_max_hz;
  out["hum_cancel"] = config.hum_cancel;
  out["reference_hz"] = config.reference_hz;
  out["bind"] = config.bind;
  out["allow_remote"] = config.allow_remote;
  out["port"] = config.port;
  out["web_root"] = config.web_root.string();
  out["max_clients"] = config.max_clients;
  out["max_message_bytes"] = config.max_message_bytes;
  out["queue_frames"] = config.queue_frames;
  out["slow_client_s"] = config.slow_client_s;
  out["requests_per_s"] = config.requests_per_s;
  out["request_burst"] = config.request_burst;
  out["stats_interval_s"] = config.stats_interval_s;
  out["stats_window_s"] = config.stats_window_s;
  out["band_dwell_s"] = config.band_dwell_s;
  out["stability_window_s"] = config.stability_window_s;
  auto optional = [](const std::optional<double>& v) { return v ? OrderedJson(*v) : OrderedJson(nullptr); };
  out["spl_offset_db"] = optional(config.spl_offset_db);
  out["dose_limit_voiced_s"] = optional(config.dose_limit_voiced_s);
  out["dose_limit_cycles"] = optional(config.dose_limit_cycles);
  out["log_level"] = config.log_level;
  out["log_file"] = config.log_file.string();
  out["token_dir"] = config.token_dir.string();
  out["record_sessions"] = config.record_sessions;
  out["session_dir"] = config.session_dir.string();
  out["exercises_file"] = config.exercises_file.string();
  out["record_audio"] = config.record_audio;
  return out.dump(2, ' ', false, OrderedJson::error_handler_t::replace);
}

}  // namespace pitchwire::daemon
