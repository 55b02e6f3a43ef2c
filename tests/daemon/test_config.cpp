// test_config.cpp: the daemon's settings: defaults, the shipped configuration file, the file reader's
// errors, the command line and its precedence over the file, the input spec and the XDG locations.
//
// Thread contract: single-threaded. Tests that change the environment (HOME, XDG_*) restore it on exit;
// every test that parses a command line points XDG_CONFIG_HOME at a fresh temporary folder so that a
// configuration file of the machine's user cannot change the outcome.
#include <gtest/gtest.h>
#include <pwd.h>
#include <unistd.h>

#include <atomic>
#include <chrono>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <functional>
#include <iterator>
#include <limits>
#include <optional>
#include <set>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "pitchwire/daemon/config.h"

namespace pitchwire::daemon {
namespace {

namespace fs = std::filesystem;

// A fresh folder under the system's temporary directory, removed with everything in it.
class TempDir {
 public:
  TempDir() {
    static std::atomic<int> counter{0};
    const auto stamp = std::chrono::steady_clock::now().time_since_epoch().count();
    path_ = fs::temp_directory_path() / ("pitchwire-config-test-" + std::to_string(::getpid()) + "-" +
                                         std::to_string(stamp) + "-" + std::to_string(counter++));
    fs::create_directories(path_);
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path_, ec);
  }
  TempDir(const TempDir&) = delete;
  TempDir& operator=(const TempDir&) = delete;

  [[nodiscard]] const fs::path& path() const { return path_; }

  fs::path write(const std::string& name, const std::string& text) const {
    const fs::path file = path_ / name;
    fs::create_directories(file.parent_path());
    std::ofstream out(file, std::ios::binary);
    out << text;
    return file;
  }

 private:
  fs::path path_;
};

// Sets (or unsets, with nullopt) an environment variable and puts the old value back on destruction.
class ScopedEnv {
 public:
  ScopedEnv(std::string name, const std::optional<std::string>& value) : name_(std::move(name)) {
    if (const char* old = std::getenv(name_.c_str())) old_ = old;
    if (value) {
      ::setenv(name_.c_str(), value->c_str(), 1);
    } else {
      ::unsetenv(name_.c_str());
    }
  }
  ~ScopedEnv() {
    if (old_) {
      ::setenv(name_.c_str(), old_->c_str(), 1);
    } else {
      ::unsetenv(name_.c_str());
    }
  }
  ScopedEnv(const ScopedEnv&) = delete;
  ScopedEnv& operator=(const ScopedEnv&) = delete;

 private:
  std::string name_;
  std::optional<std::string> old_;
};

// The message of the ConfigError `action` throws; a test failure when it throws nothing.
std::string error_of(const std::function<void()>& action) {
  try {
    action();
  } catch (const ConfigError& e) {
    return e.what();
  }
  ADD_FAILURE() << "expected a ConfigError";
  return {};
}

CommandLine parse(std::vector<std::string> args) {
  args.insert(args.begin(), "pitchwired");
  std::vector<const char*> argv;
  for (const auto& arg : args) argv.push_back(arg.c_str());
  argv.push_back(nullptr);
  return parse_command_line(static_cast<int>(args.size()), argv.data());
}

// Equality of two configurations: to_json_text writes every setting (checked by ShippedFileHasEveryKey).
bool same(const DaemonConfig& a, const DaemonConfig& b) { return to_json_text(a) == to_json_text(b); }

// The built-in defaults, as one named object (see load() on GCC 12).
const DaemonConfig& defaults() {
  static const DaemonConfig config;
  return config;
}

// Through a named base: GCC 12 reports a false "may be used uninitialized" for the default argument's
// temporary when load_config_file is inlined into a lambda.
DaemonConfig load(const fs::path& file) {
  const DaemonConfig base;
  return load_config_file(file, base);
}

fs::path shipped_config() { return fs::path(PITCHWIRE_SOURCE_DIR) / "config" / "pitchwired.jsonc"; }

std::set<std::string> keys_of(const std::string& json_text) {
  std::set<std::string> keys;
  const auto document = nlohmann::json::parse(json_text, nullptr, true, true);  // outlives the loop
  for (const auto& item : document.items()) keys.insert(item.key());
  return keys;
}

std::string read_text(const fs::path& path) {
  std::ifstream in(path, std::ios::binary);
  return {std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>()};
}

// ---- defaults and the shipped file -------------------------------------------------------------------

TEST(Config, DefaultsValidate) {
  const DaemonConfig config;
  EXPECT_NO_THROW(config.validate());
  EXPECT_EQ(config.port, kDefaultPort);
  EXPECT_EQ(config.input.kind, InputSpec::Kind::kDemo);
}

TEST(Config, ShippedFileLoadsAndEqualsTheDefaults) {
  const DaemonConfig loaded = load(shipped_config());
  EXPECT_NO_THROW(loaded.validate());
  EXPECT_EQ(to_json_text(loaded), to_json_text(defaults()));
}

TEST(Config, ShippedFileHasEveryKey) {
  // The shipped file, to_json_text and the file reader must list the same keys: a key written by
  // to_json_text and missing here would be a setting nobody is told about.
  const std::set<std::string> written = keys_of(to_json_text(defaults()));
  EXPECT_EQ(keys_of(read_text(shipped_config())), written);
  EXPECT_EQ(written.size(), 36u);
}

TEST(Config, EveryKeyIsReadFromTheFile) {
  // Every setting away from its default, written out and read back.
  DaemonConfig changed;
  changed.input = parse_input("file:/srv/voice.wav");
  changed.sample_rate_hz = 44100;
  changed.buffer_frames = 512;
  changed.channel = 2;
  changed.loop = false;
  changed.ring_s = 4;
  changed.hop_ms = 10;
  changed.settle_ms = 100;
  changed.f0_min_hz = 70;
  changed.f0_max_hz = 800;
  changed.hum_cancel = false;
  changed.reference_hz = 110;
  changed.bind = "::1";
  changed.allow_remote = true;
  changed.port = 8000;
  changed.web_root = "/srv/web";
  changed.max_clients = 16;
  changed.max_message_bytes = 8192;
  changed.queue_frames = 128;
  changed.slow_client_s = 20;
  changed.requests_per_s = 5;
  changed.request_burst = 10;
  changed.stats_interval_s = 1;
  changed.stats_window_s = 30;
  changed.band_dwell_s = 0.5;
  changed.stability_window_s = 4;
  changed.spl_offset_db = 94.5;
  changed.dose_limit_voiced_s = 600;
  changed.dose_limit_cycles = 120000;
  changed.log_level = "debug";
  changed.log_file = "/var/tmp/pitchwired.log";
  changed.token_dir = "/var/tmp/tokens";
  changed.record_sessions = false;
  changed.session_dir = "/var/tmp/sessions";
  changed.exercises_file = "/srv/exercises.jsonc";
  changed.record_audio = true;
  changed.audio_consent = true;  // a command-line flag only: never read from or written to a file
  ASSERT_NO_THROW(changed.validate());

  const std::string text = to_json_text(changed);
  const std::string defaults_text = to_json_text(defaults());
  TempDir dir;
  const DaemonConfig loaded = load(dir.write("all.jsonc", text));
  EXPECT_TRUE(same(loaded, changed)) << to_json_text(loaded) << "\nvs\n" << text;
  // Each line of the output (one key each) differs from the defaults', so every key was exercised.
  for (const auto& key : keys_of(text)) {
    SCOPED_TRACE(key);
    const auto line_of = [&key](const std::string& json_text) {
      const auto at = json_text.find("\"" + key + "\"");
      return json_text.substr(at, json_text.find('\n', at) - at);
    };
    EXPECT_NE(line_of(text), line_of(defaults_text));
  }
}

TEST(Config, KeysMissingFromTheFileKeepTheBase) {
  TempDir dir;
  DaemonConfig base;
  base.port = 9100;
  base.hop_ms = 2.5;
  const DaemonConfig loaded = load_config_file(dir.write("some.jsonc", R"({"hop_ms": 10})"), base);
  EXPECT_EQ(loaded.port, 9100);
  EXPECT_EQ(loaded.hop_ms, 10);
}

TEST(Config, CommentsAndAByteOrderMarkAreAccepted) {
  TempDir dir;
  const fs::path file = dir.write("comments.jsonc",
                                  "\xEF\xBB\xBF// a line comment\n"
                                  "{\n"
                                  "  /* a block\n     comment */ \"port\": 8001, // after a value\n"
                                  "  \"log_level\": \"warn\" /* before the end */\n"
                                  "}\n// at the end\n");
  const DaemonConfig loaded = load(file);
  EXPECT_EQ(loaded.port, 8001);
  EXPECT_EQ(loaded.log_level, "warn");
}

TEST(Config, RelativePathsAreTakenFromTheFilesFolder) {
  TempDir dir;
  const fs::path file = dir.write("etc/pw.jsonc",
                                  R"({"log_file": "logs/pw.log", "token_dir": "/abs/tokens",
                                      "input": "file:../voice.wav", "web_root": ""})");
  const DaemonConfig loaded = load(file);
  EXPECT_EQ(loaded.log_file, dir.path() / "etc" / "logs" / "pw.log");
  EXPECT_EQ(loaded.token_dir, fs::path("/abs/tokens"));
  EXPECT_EQ(loaded.input.kind, InputSpec::Kind::kFile);
  EXPECT_EQ(fs::path(loaded.input.argument), dir.path() / "voice.wav");
  EXPECT_TRUE(loaded.web_root.empty());
}

TEST(Config, ToJsonTextIsPrettyPrinted) {
  const std::string text = to_json_text(defaults());
  EXPECT_EQ(text.rfind("{\n  \"input\": \"demo\",\n", 0), 0u) << text;
  EXPECT_NE(text.find("\n  \"port\": 7350,\n"), std::string::npos) << text;
}

// ---- bad values --------------------------------------------------------------------------------------

struct BadFile {
  std::string members;   // inside the top-level object
  std::string expected;  // the message after "<file>: "
};

TEST(Config, BadValuesInTheFileNameTheKeyAndTheValue) {
  const std::vector<BadFile> cases = {
      {R"("hop_ms": 12)", "hop_ms = 12: allowed 2.5 to 10"},
      {R"("hop_ms": "5")", R"(hop_ms: expected a number, got "5")"},
      {R"("settle_ms": -1)", "settle_ms = -1: allowed 0 to 500"},
      {R"("port": "abc")", R"(port: expected an integer, got "abc")"},
      {R"("port": null)", "port: expected an integer, got null"},
      {R"("port": 7350.5)", "port: expected an integer, got 7350.5"},
      {R"("port": 70000)", "port = 70000: allowed 0 (any free port) to 65535"},
      {R"("port": -1)", "port = -1: allowed 0 (any free port) to 65535"},
      // Values no integer type holds: a range error, not a wrapped-around number.
      {R"("port": 18446744073709551615)", "port = 18446744073709551615: allowed 0 (any free port) to 65535"},
      {R"("port": 99999999999999999999)", "port = 1e+20: allowed 0 (any free port) to 65535"},
      {R"("port": 1e300)", "port = 1e+300: allowed 0 (any free port) to 65535"},
      {R"("port": 8e3)", ""},  // a whole number written with an exponent is fine
      // Beyond the range of a double: the parser stops there, and the key is still named.
      {R"("hop_ms": 1e400)", "hop_ms = 1e400: allowed 2.5 to 10"},
      {R"("port": -1e400)", "port = -1e400: allowed 0 (any free port) to 65535"},
      {R"("bind": 1e400)", "bind: the number 1e400 is too large"},
      {R"("prot": 1e400)", R"(unknown key "prot"; did you mean "port"?)"},
      {R"("channel": [1e400])", "the number 1e400 is too large"},
      {R"("buffer_frames": -5)", "buffer_frames = -5: allowed 16 to 8192"},
      {R"("buffer_frames": 4294967312)", "buffer_frames = 4294967312: allowed 16 to 8192"},
      {R"("channel": 65)", "channel = 65: allowed 0 (the mixdown of all channels) or 1 to 64"},
      {R"("channel": [1])", "channel: expected an integer, got [1]"},
      {R"("sample_rate_hz": 4000)", "sample_rate_hz = 4000: allowed a whole number of Hz from 8000 to 96000"},
      {R"("sample_rate_hz": 44100.5)", "sample_rate_hz = 44100.5: allowed a whole number of Hz from 8000 to 96000"},
      {R"("sample_rate_hz": 1e308)", "sample_rate_hz = 1e+308: allowed a whole number of Hz from 8000 to 96000"},
      {R"("loop": 1)", "loop: expected true or false, got 1"},
      {R"("hum_cancel": "no")", R"(hum_cancel: expected true or false, got "no")"},
      {R"("ring_s": 60)", "ring_s = 60: allowed 0.1 to 30"},
      {R"("f0_min_hz": 600)", "f0_min_hz = 600: allowed 30 to 500"},
      {R"("f0_max_hz": 2500)", "f0_max_hz = 2500: allowed 30 to 2000"},
      {R"("reference_hz": 10)", "reference_hz = 10: allowed 20 to 2000"},
      {R"("bind": "localhost")",
       R"(bind = "localhost": allowed an IPv4 or IPv6 address literal without brackets, such as 127.0.0.1, ::1, 0.0.0.0 or ::)"},
      {R"("bind": "[::1]")", R"(bind = "[::1]": allowed an IPv4)"},
      {R"("bind": "300.1.1.1")", R"(bind = "300.1.1.1": allowed an IPv4)"},
      {R"("bind": 127)", "bind: expected a string, got 127"},
      {R"("web_root": 5)", "web_root: expected a string, got 5"},
      {R"("log_file": "a\u0000b")", R"(log_file = "a\u0000b": a path cannot contain a NUL character)"},
      {R"("max_clients": 0)", "max_clients = 0: allowed 1 to 10000"},
      {R"("max_message_bytes": 100)", "max_message_bytes = 100: allowed 256 to 65536"},
      {R"("queue_frames": 5000)", "queue_frames = 5000: allowed 4 to 4096"},
      {R"("slow_client_s": 0.5)", "slow_client_s = 0.5: allowed 1 to 600"},
      {R"("requests_per_s": 0)", "requests_per_s = 0: allowed 1 to 1000"},
      {R"("request_burst": 20000)", "request_burst = 20000: allowed 1 to 10000"},
      {R"("stats_interval_s": 0.01)", "stats_interval_s = 0.01: allowed 0.1 to 60"},
      {R"("stats_window_s": 1000)", "stats_window_s = 1000: allowed 0.5 to 600"},
      {R"("log_level": "verbose")", R"(log_level = "verbose": allowed trace, debug, info, warn, error or off)"},
      {R"("input": "mic")", R"(input "mic": expected demo, device, device:NAME or file:PATH)"},
      {R"("input": "file:")", R"(input "file:": the path after the colon is empty)"},
  };
  TempDir dir;
  for (const auto& c : cases) {
    SCOPED_TRACE(c.members);
    const fs::path file = dir.write("bad.jsonc", "{" + c.members + "}");
    if (c.expected.empty()) {
      EXPECT_NO_THROW((void)load(file));
      continue;
    }
    const std::string message = error_of([&] { (void)load(file); });
    EXPECT_EQ(message.rfind(file.string() + ": " + c.expected, 0), 0u) << message;
    EXPECT_EQ(message.find('\n'), std::string::npos) << message;
  }
}

TEST(Config, SettingsThatDependOnEachOtherAreChecked) {
  // Through the command line, as the daemon sees them: file and flags together, then validate().
  struct Case {
    std::vector<std::string> args;
    std::string expected;
  };
  const std::vector<Case> cases = {
      {{"--f0-min", "300", "--f0-max", "400"},
       "pitchwired: f0_max_hz = 400: allowed more than 1.5 x f0_min_hz (300 Hz), at most 2000"},
      {{"--buffer-frames", "8192", "--sample-rate", "8000", "--input", "device"},
       "pitchwired: ring_s = 2: allowed at least 2 x buffer_frames (8192) at sample_rate_hz (8000), that is "
       "2.048 s, up to 30"},
      // Keeping a recording of a voice needs the speaker's consent, on the command line of each run.
      {{"--record-audio"},
       "pitchwired: record_audio is true but --audio-consent was not given: keeping a recording of a voice "
       "needs the speaker's explicit consent, given on the command line for each run (docs/sessions.md)"},
  };
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  for (const auto& c : cases) {
    SCOPED_TRACE(c.args.front());
    const CommandLine line = parse(c.args);
    EXPECT_EQ(line.exit_code, 2);
    EXPECT_EQ(line.message, c.expected);
  }
}

TEST(Config, AudioIsRecordedOnlyWithConsentGivenForTheRun) {
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  const CommandLine both = parse({"--record-audio", "--audio-consent"});
  ASSERT_FALSE(both.exit_code) << both.message;
  EXPECT_TRUE(both.config.record_audio && both.config.audio_consent);
  // record_audio from a file still needs the flag; consent alone records nothing.
  const fs::path file = dir.write("audio.jsonc", R"({"record_audio": true})");
  const CommandLine from_file = parse({"--config", file.string()});
  EXPECT_EQ(from_file.exit_code, 2);
  EXPECT_NE(from_file.message.find("--audio-consent was not given"), std::string::npos) << from_file.message;
  EXPECT_FALSE(parse({"--config", file.string(), "--audio-consent"}).exit_code);
  const CommandLine consent_only = parse({"--audio-consent"});
  ASSERT_FALSE(consent_only.exit_code) << consent_only.message;
  EXPECT_FALSE(consent_only.config.record_audio);
  // Consent is never read from a file: there is no such key.
  const fs::path sneaky = dir.write("consent.jsonc", R"({"audio_consent": true})");
  EXPECT_NE(parse({"--config", sneaky.string()}).message.find("unknown key \"audio_consent\""), std::string::npos);
}

TEST(Config, ValidateNamesTheKeyTheValueAndWhatIsAllowed) {
  struct Case {
    std::function<void(DaemonConfig&)> change;
    std::string expected;
  };
  const std::vector<Case> cases = {
      {[](DaemonConfig& c) { c.hop_ms = 12; }, "hop_ms = 12: allowed 2.5 to 10"},
      {[](DaemonConfig& c) { c.stability_window_s = 0.1; }, "stability_window_s = 0.1: allowed 0.2 to 600"},
      {[](DaemonConfig& c) { c.spl_offset_db = -3; },
       "spl_offset_db = -3: allowed null (not calibrated) or 0 to 200 dB"},
      {[](DaemonConfig& c) { c.dose_limit_voiced_s = 0; },
       "dose_limit_voiced_s = 0: allowed null (no limit) or 1 to 86400 s"},
      {[](DaemonConfig& c) { c.dose_limit_cycles = std::numeric_limits<double>::quiet_NaN(); },
       "dose_limit_cycles = nan: allowed null (no limit) or 1 to 1e9 cycles"},
      {[](DaemonConfig& c) { c.hop_ms = std::numeric_limits<double>::quiet_NaN(); },
       "hop_ms = nan: allowed 2.5 to 10"},
      {[](DaemonConfig& c) { c.sample_rate_hz = std::numeric_limits<double>::infinity(); },
       "sample_rate_hz = inf: allowed a whole number of Hz from 8000 to 96000"},
      {[](DaemonConfig& c) { c.buffer_frames = 8193; }, "buffer_frames = 8193: allowed 16 to 8192"},
      {[](DaemonConfig& c) { c.channel = -1; },
       "channel = -1: allowed 0 (the mixdown of all channels) or 1 to 64"},
      {[](DaemonConfig& c) { c.port = 65536; }, "port = 65536: allowed 0 (any free port) to 65535"},
      {[](DaemonConfig& c) { c.bind = ""; }, R"(bind = "": allowed an IPv4 or IPv6 address literal)"},
      {[](DaemonConfig& c) { c.bind = "fe80::1%eth0"; }, R"(bind = "fe80::1%eth0": allowed an IPv4)"},
      {[](DaemonConfig& c) { c.log_level = "INFO"; },
       R"(log_level = "INFO": allowed trace, debug, info, warn, error or off)"},
      {[](DaemonConfig& c) { c.max_message_bytes = 1 << 20; }, "max_message_bytes = 1048576: allowed 256 to 65536"},
      {[](DaemonConfig& c) { c.queue_frames = 3; }, "queue_frames = 3: allowed 4 to 4096"},
      {[](DaemonConfig& c) { c.f0_max_hz = 60; },
       "f0_max_hz = 60: allowed more than 1.5 x f0_min_hz (50 Hz), at most 2000"},
  };
  for (std::size_t i = 0; i < cases.size(); ++i) {
    SCOPED_TRACE(cases[i].expected);
    DaemonConfig config;
    cases[i].change(config);
    const std::string message = error_of([&] { config.validate(); });
    EXPECT_EQ(message.rfind(cases[i].expected, 0), 0u) << message;
  }
  // An address beyond this machine needs allow_remote; loopback ones do not.
  DaemonConfig v6;
  for (const char* any : {"::", "0.0.0.0", "192.0.2.10"}) {
    SCOPED_TRACE(any);
    v6.bind = any;
    v6.allow_remote = false;
    EXPECT_NE(error_of([&] { v6.validate(); }).find("listens beyond this machine: add --allow-remote"), std::string::npos);
    v6.allow_remote = true;
    EXPECT_NO_THROW(v6.validate());
  }
  v6.allow_remote = false;
  for (const char* local : {"127.0.0.1", "127.0.1.1", "::1", "::ffff:127.0.0.1"}) {
    v6.bind = local;
    EXPECT_NO_THROW(v6.validate()) << local;
  }
}

// ---- the file as a whole -----------------------------------------------------------------------------

TEST(Config, UnknownKeysAreErrorsWithASuggestion) {
  struct Case {
    std::string members;
    std::string expected;
  };
  const std::vector<Case> cases = {
      {R"("prot": 1)", R"(unknown key "prot"; did you mean "port"?)"},
      {R"("hop_s": 5)", R"(unknown key "hop_s"; did you mean "hop_ms"?)"},
      {R"("Log_Level": "info")", R"(unknown key "Log_Level"; did you mean "log_level"?)"},
      {R"("colour": "blue")", R"(unknown key "colour")"},
  };
  TempDir dir;
  for (const auto& c : cases) {
    SCOPED_TRACE(c.members);
    const fs::path file = dir.write("unknown.jsonc", "{\"port\": 7350, " + c.members + "}");
    const std::string message = error_of([&] { (void)load(file); });
    EXPECT_EQ(message, file.string() + ": " + c.expected);
  }
}

TEST(Config, SyntaxErrorsGiveLineAndColumn) {
  struct Case {
    std::string text;
    std::string position;
  };
  const std::vector<Case> cases = {
      // Missing comma: the error is at the opening quote of the next key.
      {"{\n  \"port\": 7350,\n  \"bind\": \"127.0.0.1\"\n  \"hop_ms\": 5\n}\n", "line 4, column 3: "},
      // Columns count characters, not bytes: "é" is two bytes of UTF-8.
      {"// réglages\n{\"log_level\": \"é\", x}", "line 2, column 20: "},
      {"{\"port\": 7350,}", "line 1, column 15: "},
      // Positions are at the start of the offending token, as an editor shows it.
      {"{\"loop\": tx}", "line 1, column 10: "},
      {"{\"a\": 1 22}", "line 1, column 9: "},
      {"{\"a\\\"b\": 1 \"c\"}", "line 1, column 12: "},
      {"{\"port\": 7350", "line 1, column 14: "},
      {"/* unterminated comment", "line 1, column "},
  };
  TempDir dir;
  for (const auto& c : cases) {
    SCOPED_TRACE(c.text);
    const fs::path file = dir.write("syntax.jsonc", c.text);
    const std::string message = error_of([&] { (void)load(file); });
    EXPECT_EQ(message.rfind(file.string() + ": " + c.position, 0), 0u) << message;
    EXPECT_EQ(message.find("json.exception"), std::string::npos) << message;
    EXPECT_EQ(message.find('\n'), std::string::npos) << message;
  }
}

TEST(Config, TheFileMustBeOneObject) {
  TempDir dir;
  struct Case {
    std::string text;
    std::string expected;
  };
  const std::vector<Case> cases = {
      {"[1, 2]", "expected a JSON object of settings"},
      {"7350", "expected a JSON object of settings"},
      {"", "the file is empty"},
      {"  \n\t\n", "the file is empty"},
      {R"({"port": 1, "port": 2})", R"(key "port" appears more than once)"},
  };
  for (const auto& c : cases) {
    SCOPED_TRACE(c.text);
    const fs::path file = dir.write("shape.jsonc", c.text);
    const std::string message = error_of([&] { (void)load(file); });
    EXPECT_EQ(message.rfind(file.string() + ": " + c.expected, 0), 0u) << message;
  }
}

TEST(Config, MissingAndUnreadableFiles) {
  TempDir dir;
  const fs::path missing = dir.path() / "nope.jsonc";
  EXPECT_EQ(error_of([&] { (void)load(missing); }), missing.string() + ": no such file");
  // A folder opens but cannot be read (EISDIR); root can read any file, so this is the portable case.
  const fs::path folder = dir.path() / "folder.jsonc";
  fs::create_directories(folder);
  EXPECT_EQ(error_of([&] { (void)load(folder); }), folder.string() + ": cannot read: Is a directory");
}

// ---- the command line --------------------------------------------------------------------------------

TEST(Config, FlagsOverrideTheFile) {
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  const fs::path file = dir.write("pw.jsonc", R"({"port": 8000, "hop_ms": 10, "log_level": "debug", "loop": true})");
  const CommandLine line = parse({"--config", file.string(), "--port", "9000", "--log-level", "warn", "--no-loop",
                                  "--no-hum-cancel", "--input", "device:USB", "--f0-min", "60", "--f0-max", "900",
                                  "--settle-ms", "0", "--channel", "2", "--sample-rate", "44100",
                                  "--buffer-frames", "128", "--bind", "::1", "--web-root", "/srv/web",
                                  "--log-file", "/tmp/pw.log"});
  ASSERT_FALSE(line.exit_code) << line.message;
  EXPECT_EQ(line.config.port, 9000);            // flag over file
  EXPECT_EQ(line.config.hop_ms, 10);            // file over default
  EXPECT_EQ(line.config.log_level, "warn");
  EXPECT_FALSE(line.config.loop);
  EXPECT_FALSE(line.config.hum_cancel);
  EXPECT_EQ(line.config.input.kind, InputSpec::Kind::kDevice);
  EXPECT_EQ(line.config.input.argument, "USB");
  EXPECT_EQ(line.config.f0_min_hz, 60);
  EXPECT_EQ(line.config.f0_max_hz, 900);
  EXPECT_EQ(line.config.settle_ms, 0);
  EXPECT_EQ(line.config.channel, 2);
  EXPECT_EQ(line.config.sample_rate_hz, 44100);
  EXPECT_EQ(line.config.buffer_frames, 128u);
  EXPECT_EQ(line.config.bind, "::1");
  EXPECT_EQ(line.config.web_root, fs::path("/srv/web"));
  EXPECT_EQ(line.config.log_file, fs::path("/tmp/pw.log"));
  EXPECT_EQ(line.config.max_clients, defaults().max_clients);  // untouched: the default
  EXPECT_FALSE(line.check_config);
  EXPECT_FALSE(line.list_devices);
}

TEST(Config, TheLastOfARepeatedFlagWins) {
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  const CommandLine line = parse({"--port", "8001", "--port=8002"});
  ASSERT_FALSE(line.exit_code) << line.message;
  EXPECT_EQ(line.config.port, 8002);
}

TEST(Config, TheDefaultFileIsReadOnlyWhenItExists) {
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  {
    const CommandLine line = parse({});
    ASSERT_FALSE(line.exit_code) << line.message;
    EXPECT_TRUE(same(line.config, defaults()));
  }
  dir.write("pitchwire/pitchwired.jsonc", R"({"port": 8123})");
  {
    const CommandLine line = parse({});
    ASSERT_FALSE(line.exit_code) << line.message;
    EXPECT_EQ(line.config.port, 8123);
  }
  dir.write("pitchwire/pitchwired.jsonc", R"({"port": 99999})");
  {
    const CommandLine line = parse({});
    EXPECT_EQ(line.exit_code, 2);
    EXPECT_EQ(line.message, "pitchwired: " + (dir.path() / "pitchwire" / "pitchwired.jsonc").string() +
                                ": port = 99999: allowed 0 (any free port) to 65535");
  }
  {
    // --config replaces the default file rather than adding to it.
    const fs::path other = dir.write("other.jsonc", R"({"hop_ms": 10})");
    const CommandLine line = parse({"--config", other.string()});
    ASSERT_FALSE(line.exit_code) << line.message;
    EXPECT_EQ(line.config.port, kDefaultPort);
    EXPECT_EQ(line.config.hop_ms, 10);
  }
}

TEST(Config, ConfigFlagNeedsAnExistingFile) {
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  const fs::path missing = dir.path() / "missing.jsonc";
  const CommandLine line = parse({"--config", missing.string()});
  EXPECT_EQ(line.exit_code, 2);
  EXPECT_EQ(line.message, "pitchwired: " + missing.string() + ": no such file");
}

TEST(Config, CheckConfigAndListDevicesSetTheirFlags) {
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  const CommandLine check = parse({"--check-config"});
  EXPECT_FALSE(check.exit_code) << check.message;
  EXPECT_TRUE(check.check_config);
  EXPECT_FALSE(check.list_devices);
  const CommandLine list = parse({"--list-devices"});
  EXPECT_FALSE(list.exit_code) << list.message;
  EXPECT_TRUE(list.list_devices);
  EXPECT_FALSE(list.check_config);
}

TEST(Config, HelpAndVersionExitZero) {
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  const CommandLine help = parse({"--help"});
  EXPECT_EQ(help.exit_code, 0);
  const std::string first_line = help.message.substr(0, help.message.find('\n'));
  EXPECT_NE(first_line.find("pitchwired"), std::string::npos) << first_line;
  EXPECT_NE(first_line.find("WebSocket"), std::string::npos) << first_line;
  for (const char* flag : {"--input", "--port", "--bind", "--config", "--check-config", "--list-devices",
                           "--channel", "--sample-rate", "--buffer-frames", "--hop-ms", "--settle-ms", "--f0-min",
                           "--f0-max", "--no-hum-cancel", "--no-loop", "--web-root", "--log-level", "--log-file",
                           "--version", "--help"}) {
    SCOPED_TRACE(flag);
    EXPECT_NE(help.message.find(flag), std::string::npos);
  }
  const CommandLine version = parse({"--version"});
  EXPECT_EQ(version.exit_code, 0);
  EXPECT_EQ(version.message.rfind("pitchwired ", 0), 0u) << version.message;
  EXPECT_EQ(version.message.find('\n'), std::string::npos);
}

TEST(Config, BadFlagsExitTwoWithOneLine) {
  struct Case {
    std::vector<std::string> args;
    std::string expected;  // the start of the message
  };
  const std::vector<Case> cases = {
      {{"--port", "abc"}, R"(pitchwired: --port "abc": expected an integer)"},
      {{"--port", "70000"}, "pitchwired: --port 70000: allowed 0 (any free port) to 65535"},
      {{"--port", "99999999999999999999"}, "pitchwired: --port 99999999999999999999: allowed 0 (any free port)"},
      {{"--port", "80.5"}, R"(pitchwired: --port "80.5": expected an integer)"},
      {{"--hop-ms", "0"}, "pitchwired: --hop-ms 0: allowed 2.5 to 10"},
      {{"--hop-ms", "nan"}, "pitchwired: --hop-ms nan: allowed 2.5 to 10"},
      {{"--hop-ms", "1e400"}, "pitchwired: --hop-ms 1e400: allowed 2.5 to 10"},
      {{"--hop-ms", "5ms"}, R"(pitchwired: --hop-ms "5ms": expected a number)"},
      {{"--sample-rate", "44100.5"}, "pitchwired: --sample-rate 44100.5: allowed a whole number of Hz"},
      {{"--channel", "-1"}, "pitchwired: --channel -1: allowed 0 (the mixdown of all channels) or 1 to 64"},
      {{"--buffer-frames", "-5"}, "pitchwired: --buffer-frames -5: allowed 16 to 8192"},
      {{"--f0-min", "20"}, "pitchwired: --f0-min 20: allowed 30 to 500"},
      {{"--log-level", "loud"}, R"(pitchwired: --log-level "loud": allowed trace, debug, info, warn, error or off)"},
      {{"--input", "mic"}, R"(pitchwired: --input "mic": expected demo, device, device:NAME or file:PATH)"},
      {{"--bind", "::1:"}, R"(pitchwired: --bind "::1:": allowed an IPv4 or IPv6 address literal)"},
      {{"--bind", "a\nb"}, R"(pitchwired: --bind "a\nb": allowed)"},
      {{"--config", ""}, "pitchwired: --config: the file name is empty"},
      {{"--bogus"}, "pitchwired: "},
      {{"--port"}, "pitchwired: "},
      {{"extra"}, "pitchwired: "},
  };
  TempDir dir;
  ScopedEnv xdg("XDG_CONFIG_HOME", dir.path().string());
  for (const auto& c : cases) {
    SCOPED_TRACE(c.args.front() + (c.args.size() > 1 ? " " + c.args[1] : ""));
    const CommandLine line = parse(c.args);
    EXPECT_EQ(line.exit_code, 2);
    EXPECT_EQ(line.message.rfind(c.expected, 0), 0u) << line.message;
    EXPECT_EQ(line.message.find('\n'), std::string::npos) << line.message;
    EXPECT_GT(line.message.size(), std::string("pitchwired: ").size()) << line.message;
  }
}

// ---- the input spec ----------------------------------------------------------------------------------

TEST(Config, ParseInputAcceptsEveryForm) {
  struct Case {
    std::string text;
    InputSpec::Kind kind;
    std::string argument;
  };
  const std::vector<Case> cases = {
      {"demo", InputSpec::Kind::kDemo, ""},
      {"device", InputSpec::Kind::kDevice, ""},
      {"device:USB Audio", InputSpec::Kind::kDevice, "USB Audio"},
      {"device:hw:1,0", InputSpec::Kind::kDevice, "hw:1,0"},  // device names may hold colons
      {"file:/tmp/voice.wav", InputSpec::Kind::kFile, "/tmp/voice.wav"},
      {"file:take:2.wav", InputSpec::Kind::kFile, "take:2.wav"},
  };
  for (const auto& c : cases) {
    SCOPED_TRACE(c.text);
    const InputSpec spec = parse_input(c.text);
    EXPECT_EQ(spec.kind, c.kind);
    EXPECT_EQ(spec.argument, c.argument);
    EXPECT_EQ(spec.text(), c.text);
  }
}

TEST(Config, ParseInputRejectsEverythingElse) {
  for (const std::string text : {"", "foo", "Demo", "demo:x", "file", "file:", "device:", "devices", " demo"}) {
    SCOPED_TRACE(text);
    const std::string message = error_of([&] { (void)parse_input(text); });
    EXPECT_EQ(message.rfind("input " + nlohmann::json(text).dump() + ": ", 0), 0u) << message;
    EXPECT_NE(message.find("expected demo, device, device:NAME or file:PATH"), std::string::npos) << message;
  }
  EXPECT_EQ(error_of([] { (void)parse_input("foo"); }),
            R"(input "foo": expected demo, device, device:NAME or file:PATH)");
}

// ---- XDG locations -----------------------------------------------------------------------------------

TEST(Config, XdgVariablesAreUsedWhenSetAndAbsolute) {
  ScopedEnv home("HOME", "/home/someone");
  {
    ScopedEnv config("XDG_CONFIG_HOME", "/xdg/config");
    ScopedEnv state("XDG_STATE_HOME", "/xdg/state");
    EXPECT_EQ(default_config_path(), fs::path("/xdg/config/pitchwire/pitchwired.jsonc"));
    EXPECT_EQ(default_state_dir(), fs::path("/xdg/state/pitchwire"));
  }
  {
    ScopedEnv config("XDG_CONFIG_HOME", std::nullopt);
    ScopedEnv state("XDG_STATE_HOME", std::nullopt);
    EXPECT_EQ(default_config_path(), fs::path("/home/someone/.config/pitchwire/pitchwired.jsonc"));
    EXPECT_EQ(default_state_dir(), fs::path("/home/someone/.local/state/pitchwire"));
  }
  {
    // The spec: relative paths in these variables are invalid and ignored; so are empty ones.
    ScopedEnv config("XDG_CONFIG_HOME", "relative/config");
    ScopedEnv state("XDG_STATE_HOME", "");
    EXPECT_EQ(default_config_path(), fs::path("/home/someone/.config/pitchwire/pitchwired.jsonc"));
    EXPECT_EQ(default_state_dir(), fs::path("/home/someone/.local/state/pitchwire"));
  }
}

TEST(Config, WithoutHomeThePasswordDatabaseIsUsed) {
  const passwd* entry = ::getpwuid(::getuid());
  if (entry == nullptr || entry->pw_dir == nullptr || entry->pw_dir[0] == '\0') {
    GTEST_SKIP() << "this user has no password database entry";
  }
  const fs::path expected_home = entry->pw_dir;
  ScopedEnv home("HOME", std::nullopt);
  ScopedEnv config("XDG_CONFIG_HOME", std::nullopt);
  ScopedEnv state("XDG_STATE_HOME", std::nullopt);
  EXPECT_EQ(default_config_path(), expected_home / ".config" / "pitchwire" / "pitchwired.jsonc");
  EXPECT_EQ(default_state_dir(), expected_home / ".local" / "state" / "pitchwire");
}

}  // namespace
}  // namespace pitchwire::daemon
