// config.h: the daemon's settings, read from a JSON file with comments and from the command line.
//
// Precedence: built-in defaults < configuration file < command-line flags. The file is
// $XDG_CONFIG_HOME/pitchwire/pitchwired.jsonc (~/.config/... when XDG_CONFIG_HOME is unset) when it exists,
// or the one given with --config FILE (which must exist). Every bad value gets a ConfigError whose message
// is one line naming the key, the value and what is allowed; unknown keys are errors too (a typo must not
// silently leave a default in place).
//
// Thread contract: pure functions over values; call them from the main thread before anything starts.
#pragma once

#include <cstddef>
#include <filesystem>
#include <optional>
#include <stdexcept>
#include <string>
#include <vector>

namespace pitchwire::daemon {

class ConfigError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

// Where audio comes from: "demo", "device" (default input), "device:NAME", "file:PATH".
struct InputSpec {
  enum class Kind { kDemo, kDevice, kFile };
  Kind kind = Kind::kDemo;
  std::string argument;  // device name (may be empty) or file path
  [[nodiscard]] std::string text() const;  // back to the "kind:argument" form
};
// Throws ConfigError naming the value and the allowed forms.
[[nodiscard]] InputSpec parse_input(const std::string& text);

inline constexpr int kDefaultPort = 7350;

struct DaemonConfig {
  // audio
  InputSpec input;                    // key "input"
  double sample_rate_hz = 48000.0;    // "sample_rate_hz": 8000..96000 (device; a file plays at its own rate)
  unsigned buffer_frames = 256;       // "buffer_frames": 16..8192 frames per device callback
  int channel = 0;                    // "channel": 0 (mixdown) or 1..64
  bool loop = true;                   // "loop": replay a file again at its end
  double ring_s = 2.0;                // "ring_s": 0.1..30 s of audio the capture ring holds

  // estimator (dsp::TrackerConfig; the same defaults as `pitchwire analyze`)
  double hop_ms = 5.0;                // "hop_ms": 2.5..10
  double settle_ms = 60.0;            // "settle_ms": 0..500
  double f0_min_hz = 50.0;            // "f0_min_hz", "f0_max_hz": as dsp::TrackerConfig allows (docs/configuration.md)
  double f0_max_hz = 1400.0;
  bool hum_cancel = true;             // "hum_cancel"
  double reference_hz = 100.0;        // "reference_hz": 20..2000, semitones are re this frequency

  // server
  std::string bind = "127.0.0.1";     // "bind": an IPv4 or IPv6 address literal
  bool allow_remote = false;          // "allow_remote": a bind beyond loopback is meant; every client needs a token
  int port = kDefaultPort;            // "port": 0 (pick a free one) .. 65535
  std::filesystem::path web_root;     // "web_root": folder of the live page; empty = the built-in default
  int max_clients = 512;              // "max_clients": 1..10000 WebSocket connections at once
  std::size_t max_message_bytes = 16384;  // "max_message_bytes": 256..65536, largest client message
  std::size_t queue_frames = 64;      // "queue_frames": 4..4096 frames queued per client before dropping
  double slow_client_s = 10.0;        // "slow_client_s": 1..600, a client behind this long is closed
  double requests_per_s = 20.0;       // "requests_per_s": 1..1000 sustained client requests per connection
  double request_burst = 40.0;        // "request_burst": 1..10000
  double stats_interval_s = 0.5;      // "stats_interval_s": 0.1..60
  double stats_window_s = 5.0;        // "stats_window_s": 0.5..600
  double band_dwell_s = 0.25;         // "band_dwell_s": 0..5, band state hysteresis (docs/measures.md)
  double stability_window_s = 2.0;    // "stability_window_s": 0.2..600, window of the F0 SD (stability)

  // measures (docs/measures.md)
  std::optional<double> spl_offset_db;        // "spl_offset_db": null or 0..200; dB SPL = dBFS + offset
  std::optional<double> dose_limit_voiced_s;  // "dose_limit_voiced_s": null or 1..86400 s of voicing
  std::optional<double> dose_limit_cycles;    // "dose_limit_cycles": null or 1..1e9 vocal fold cycles

  // logging and files
  std::string log_level = "info";     // "log_level": trace, debug, info, warn, error, off
  std::filesystem::path log_file;     // "log_file": empty = $XDG_STATE_HOME/pitchwire/pitchwired.log
  std::filesystem::path token_dir;    // "token_dir": empty = $XDG_STATE_HOME/pitchwire (mode 0700)
  bool record_sessions = true;        // "record_sessions": keep a session record (docs/sessions.md)
  std::filesystem::path session_dir;  // "session_dir": empty = $XDG_STATE_HOME/pitchwire/sessions (0700)
  std::filesystem::path exercises_file;  // "exercises_file": empty = the shipped config/exercises.jsonc
  bool record_audio = false;          // "record_audio": also keep the input as audio.wav (needs consent)
  bool audio_consent = false;         // --audio-consent only (never from a file): the speaker agreed to it

  // Throws ConfigError (first problem found, naming the key, the value and what is allowed).
  void validate() const;
};

// Reads a configuration file (JSON with // and /* */ comments; an object whose keys are those above).
// Keys not present keep the values already in `base`. Throws ConfigError naming the file for I/O and
// syntax problems (with line and column), and the key for bad values.
[[nodiscard]] DaemonConfig load_config_file(const std::filesystem::path& path, DaemonConfig base = {});

// The default configuration file path (it need not exist).
[[nodiscard]] std::filesystem::path default_config_path();
// $XDG_STATE_HOME/pitchwire, or ~/.local/state/pitchwire.
[[nodiscard]] std::filesystem::path default_state_dir();

// What the command line asked for.
struct CommandLine {
  DaemonConfig config;
  bool check_config = false;  // --check-config: validate, print the effective settings, exit 0
  bool list_devices = false;  // --list-devices: print input devices, exit
  std::optional<int> exit_code;  // set when the process should exit at once (--help, --version, bad flags)
  std::string message;           // what to print then (help text, or one-line error)
};

// Parses argv with CLI11: --input, --port, --bind, --config, --check-config, --list-devices, --channel,
// --sample-rate, --buffer-frames, --hop-ms, --settle-ms, --f0-min, --f0-max, --no-hum-cancel, --no-loop,
// --web-root, --log-level, --log-file, --record-audio, --audio-consent, --allow-remote, --version, --help. Loads the configuration file (default path
// when it exists, or --config), then applies the flags, then validates. Never throws: problems come back
// as exit_code 2 with a one-line message.
[[nodiscard]] CommandLine parse_command_line(int argc, const char* const* argv);

// The effective settings as JSON text (for --check-config and the log at start).
[[nodiscard]] std::string to_json_text(const DaemonConfig& config);

}  // namespace pitchwire::daemon
