// main.cpp: pitchwired, the live daemon. Reads the configuration, opens the audio source, starts the
// analysis thread and the server, prints the URLs of the live page, and runs until SIGINT or SIGTERM (or
// the end of a file replayed without loop).
//
// Thread contract: this is the control thread. SIGINT and SIGTERM are blocked in every thread and taken
// here with sigtimedwait, so no signal handler runs anywhere. The same loop drives the systemd watchdog
// from the audio heartbeat (samples arriving in the ring).
#include <signal.h>
#include <sys/random.h>
#include <sys/stat.h>
#include <systemd/sd-daemon.h>

#include <atomic>
#include <cerrno>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <iostream>
#include <memory>
#include <string>

#include <spdlog/sinks/rotating_file_sink.h>
#include <spdlog/sinks/stdout_color_sinks.h>
#include <spdlog/spdlog.h>

#include "pitchwire/daemon/audio_source.h"
#include "pitchwire/daemon/config.h"
#include "pitchwire/daemon/exercises.h"
#include "pitchwire/daemon/pipeline.h"
#include "pitchwire/daemon/recorder.h"
#include "pitchwire/daemon/server.h"

namespace pw = pitchwire::daemon;
namespace fs = std::filesystem;

namespace {

// Exercise presets start_exercise accepts until preset files are configured.

// Rotating log: 5 files of 5 MB at most.
constexpr std::size_t kLogFileBytes = 5 * 1024 * 1024;
constexpr std::size_t kLogFiles = 5;
// The ring holds ring_s seconds at the highest rate any source may deliver.
constexpr double kMaxSourceRateHz = 96000.0;

// Creates `dir` (and parents) when it does not exist, private (0700): it holds tokens and logs. An
// existing folder is left as it is (it may be /tmp or a folder the user chose and shares), but one
// that others may read gets a warning when it holds tokens.
void make_private_dir(const fs::path& dir, bool warn_if_open = false) {
  if (dir.empty()) return;  // a relative file name: the working directory
  std::error_code ec;
  if (fs::is_directory(dir, ec)) {
    if (warn_if_open) {
      const auto perms = fs::status(dir, ec).permissions();
      if ((perms & (fs::perms::group_all | fs::perms::others_all)) != fs::perms::none) {
        spdlog::warn("{}: others may list this folder; the token files in it are 0600", dir.string());
      }
    }
    return;
  }
  fs::create_directories(dir);
  if (::chmod(dir.c_str(), 0700) != 0) {
    throw std::runtime_error(dir.string() + ": cannot make private: " + std::strerror(errno));
  }
}

// 128 random bits as 32 hex digits, from the kernel's CSPRNG (getrandom(2)).
std::string random_token() {
  unsigned char bytes[16];
  std::size_t got = 0;
  while (got < sizeof bytes) {
    const ssize_t n = ::getrandom(bytes + got, sizeof bytes - got, 0);
    if (n < 0) {
      if (errno == EINTR) continue;
      throw std::runtime_error(std::string("cannot get random bytes: ") + std::strerror(errno));
    }
    got += static_cast<std::size_t>(n);
  }
  static constexpr char kHex[] = "0123456789abcdef";
  std::string out;
  for (unsigned char b : bytes) {
    out.push_back(kHex[b >> 4]);
    out.push_back(kHex[b & 15]);
  }
  return out;
}

// The token kept in `path` (mode 0600), created on first start.
// A token file that others could read may have been read: it is replaced by a new token.
std::string load_or_create_token(const fs::path& path) {
  if (std::ifstream in(path); in) {
    std::string token;
    std::getline(in, token);
    struct stat st {};
    const bool private_file = ::stat(path.c_str(), &st) == 0 && (st.st_mode & 077) == 0 && st.st_uid == ::geteuid();
    const bool valid = token.size() == 32 && token.find_first_not_of("0123456789abcdef") == std::string::npos;
    if (valid && private_file) return token;
    if (!valid) {
      spdlog::warn("{}: not a valid token, making a new one", path.string());
    } else {
      spdlog::warn("{}: readable by others (mode {:o}) or not ours, so the token may be known: making a new one",
                   path.string(), st.st_mode & 0777);
    }
  }
  const std::string token = random_token();
  const fs::path tmp = path.string() + ".new";
  {
    // Created 0600 from the start (umask can only take bits away).
    const mode_t old = ::umask(077);
    std::ofstream out(tmp, std::ios::trunc);
    ::umask(old);
    out << token << '\n';
    if (!out.flush()) throw std::runtime_error(tmp.string() + ": cannot write");
  }
  ::chmod(tmp.c_str(), 0600);
  fs::rename(tmp, path);
  return token;
}

void set_up_logging(const pw::DaemonConfig& config) {
  std::vector<spdlog::sink_ptr> sinks;
  auto console = std::make_shared<spdlog::sinks::stderr_color_sink_mt>();
  console->set_pattern("pitchwired %^%l%$: %v");
  sinks.push_back(console);
  fs::path file = config.log_file.empty() ? pw::default_state_dir() / "pitchwired.log" : config.log_file;
  std::string file_problem;
  try {
    make_private_dir(file.parent_path());
    const mode_t old = ::umask(077);  // the log names clients and devices: keep it private
    sinks.push_back(std::make_shared<spdlog::sinks::rotating_file_sink_mt>(file.string(), kLogFileBytes, kLogFiles));
    ::umask(old);
  } catch (const std::exception& e) {
    file_problem = e.what();
  }
  auto logger = std::make_shared<spdlog::logger>("pitchwired", sinks.begin(), sinks.end());
  logger->set_level(spdlog::level::from_str(config.log_level));
  // Errors reach the file at once; the rest within a second (flush_every). Not on warn: overflow events
  // are logged as warnings on the analysis thread, which must not wait for the disk.
  logger->flush_on(spdlog::level::err);
  spdlog::set_default_logger(logger);
  spdlog::flush_every(std::chrono::seconds(1));
  if (!file_problem.empty()) spdlog::warn("logging to the console only: {}", file_problem);
}

std::unique_ptr<pw::AudioSource> make_source(const pw::DaemonConfig& config) {
  pw::SourceOptions options;
  options.sample_rate_hz = config.sample_rate_hz;
  options.buffer_frames = config.buffer_frames;
  options.channel = config.channel;
  options.loop = config.loop;
  switch (config.input.kind) {
    case pw::InputSpec::Kind::kDemo: return pw::make_demo_source(options);
    case pw::InputSpec::Kind::kFile: return pw::make_file_source(config.input.argument, options);
    case pw::InputSpec::Kind::kDevice: return pw::make_device_source(config.input.argument, options);
  }
  throw std::logic_error("unknown input kind");
}

// Forwards source events to the server and remembers whether the device is away (then the watchdog is
// kept alive by the source's retries rather than by samples).
class SourceRelay final : public pw::SourceListener {
 public:
  explicit SourceRelay(pw::Server& server) : server_(server) {}
  void on_device_lost(const std::string& device, const std::string& reason) override {
    lost_.store(true);
    server_.on_device_lost(device, reason);
  }
  void on_device_back(const std::string& device) override {
    lost_.store(false);
    server_.on_device_back(device);
  }
  [[nodiscard]] bool device_lost() const { return lost_.load(); }

 private:
  pw::Server& server_;
  std::atomic<bool> lost_{false};
};

// The pipeline's listener: every frame, statistic and event goes to the server; settled frames and
// statistics also go to the session record (events reach it through ServerOptions::on_event_sent).
class RecordingTee final : public pw::PipelineListener {
 public:
  RecordingTee(pw::Server& server, pw::Recorder* recorder) : server_(server), recorder_(recorder) {}
  void on_live(const pitchwire::dsp::LiveFrame& frame) override { server_.on_live(frame); }
  void on_settled(const pitchwire::dsp::SettledFrame& frame) override {
    server_.on_settled(frame);
    if (recorder_) recorder_->record_settled(frame);
  }
  void on_stats(const pitchwire::protocol::Stats& stats) override {
    server_.on_stats(stats);
    if (recorder_) recorder_->record_stats(stats);
  }
  void on_event(const pitchwire::protocol::Event& event) override { server_.on_event(event); }
  void on_audio(std::span<const float> samples) override {
    if (recorder_) recorder_->record_audio(samples);
  }
  void on_end() override { server_.on_end(); }

 private:
  pw::Server& server_;
  pw::Recorder* recorder_;
};

int run(const pw::DaemonConfig& config) {
  spdlog::info("pitchwired {} starting; settings:\n{}", PITCHWIRE_VERSION, pw::to_json_text(config));

  const fs::path token_dir = config.token_dir.empty() ? pw::default_state_dir() : config.token_dir;
  make_private_dir(token_dir, true);
  const std::string supervisor_token = load_or_create_token(token_dir / "supervisor.token");
  const std::string lab_token = load_or_create_token(token_dir / "lab.token");
  // Listening beyond this machine, every client needs a token: observers get one of their own.
  const std::string observer_token = config.allow_remote ? load_or_create_token(token_dir / "observer.token") : "";

  pw::ServerOptions options;
  options.bind = config.bind;
  options.port = config.port;
  options.web_root = config.web_root.empty() ? fs::path(PITCHWIRE_DEFAULT_WEB_ROOT) : config.web_root;
  if (std::error_code ec; !fs::is_directory(options.web_root, ec)) {
    spdlog::warn("web_root {}: no such folder; the live page will not be served (set web_root)",
                 options.web_root.string());
  }
  options.max_clients = config.max_clients;
  options.max_message_bytes = config.max_message_bytes;
  options.queue_frames = config.queue_frames;
  options.slow_client_s = config.slow_client_s;
  options.requests_per_s = config.requests_per_s;
  options.request_burst = config.request_burst;
  options.supervisor_token = supervisor_token;
  options.lab_token = lab_token;
  options.observer_token = observer_token;
  options.require_token = config.allow_remote;
  {
    // The presets' band limits are checked as set_band requests are, against the same range.
    pitchwire::protocol::DecodeOptions limits;
    limits.reference_hz = config.reference_hz;
    limits.f0_min_hz = config.f0_min_hz;
    limits.f0_max_hz = config.f0_max_hz;
    // Default: the source tree's file when built in place, else the installed one.
    fs::path presets_file = config.exercises_file;
    if (presets_file.empty()) {
      std::error_code ec;
      presets_file = fs::exists(PITCHWIRE_DEFAULT_EXERCISES, ec) ? fs::path(PITCHWIRE_DEFAULT_EXERCISES)
                                                                   : fs::path(PITCHWIRE_INSTALLED_EXERCISES);
    }
    options.presets = pw::load_exercise_presets(presets_file, limits);
    spdlog::info("{} exercise presets from {}", options.presets.size(), presets_file.string());
  }
  options.hello.server_version = PITCHWIRE_VERSION;
  options.hello.hop_ms = config.hop_ms;
  options.hello.settle_ms = config.settle_ms;
  options.hello.reference_hz = config.reference_hz;
  options.hello.f0_min_hz = config.f0_min_hz;
  options.hello.f0_max_hz = config.f0_max_hz;
  options.hello.spl_offset_db = config.spl_offset_db;
  for (const auto& preset : options.presets) options.hello.presets.push_back({preset.name, preset.label});

  pw::SampleRing ring(static_cast<std::size_t>(config.ring_s * kMaxSourceRateHz));
  std::unique_ptr<pw::AudioSource> source = make_source(config);
  pw::PipelineOptions pipeline_options;
  pipeline_options.tracker.hop_ms = config.hop_ms;
  pipeline_options.tracker.settle_ms = config.settle_ms;
  pipeline_options.tracker.f0_min_hz = config.f0_min_hz;
  pipeline_options.tracker.f0_max_hz = config.f0_max_hz;
  pipeline_options.tracker.hum_cancel = config.hum_cancel;
  pipeline_options.stats_interval_s = config.stats_interval_s;
  pipeline_options.stats_window_s = config.stats_window_s;
  pipeline_options.band_dwell_s = config.band_dwell_s;
  pipeline_options.stability_window_s = config.stability_window_s;
  pipeline_options.reference_hz = config.reference_hz;
  pipeline_options.spl_offset_db = config.spl_offset_db;
  pipeline_options.dose_limit_voiced_s = config.dose_limit_voiced_s;
  pipeline_options.dose_limit_cycles = config.dose_limit_cycles;

  // The session record (docs/sessions.md): unfinished sessions of an earlier run are closed first.
  std::unique_ptr<pw::Recorder> recorder;
  std::unique_ptr<pw::Pipeline> pipeline;
  // The audio clock as other threads (network, recorder) read it: set once the pipeline has started.
  std::atomic<const pw::Pipeline*> clock{nullptr};
  auto audio_now = [&clock] {
    const pw::Pipeline* p = clock.load(std::memory_order_acquire);
    return p ? p->audio_time_s() : 0.0;
  };
  pw::Server* server_for_problems = nullptr;  // set once the server exists; the recorder starts after
  if (config.record_audio && !config.record_sessions) {
    spdlog::warn("record_audio is true but record_sessions is false: no audio is kept (it goes in the session folder)");
  }
  if (config.record_sessions) {
    const fs::path sessions = config.session_dir.empty() ? pw::default_state_dir() / "sessions" : config.session_dir;
    for (const fs::path& dir : pw::Recorder::close_unfinished(sessions)) {
      spdlog::warn("session {} was not closed (the daemon stopped abruptly); its summary is written now", dir.string());
    }
    pw::RecorderOptions recorder_options;
    recorder_options.sessions_dir = sessions;
    recorder_options.source = source->describe();
    recorder_options.hop_ms = config.hop_ms;
    // Only with the speaker's consent, checked with the settings (--audio-consent).
    recorder_options.record_audio = config.record_audio && config.audio_consent;
    recorder = std::make_unique<pw::Recorder>(
        recorder_options, [audio_now, &server_for_problems](const std::string& message, bool resolved) {
          if (resolved) {
            spdlog::info("{}", message);
          } else {
            spdlog::error("{}; the live stream goes on without a record", message);
          }
          if (server_for_problems) {
            server_for_problems->on_event(
                pitchwire::protocol::recording_problem_event(audio_now(), message, resolved));
          }
        });
    options.on_event_sent = [rec = recorder.get()](const pitchwire::protocol::Event& event) { rec->record_event(event); };
  }
  options.audio_clock = audio_now;
  // The network thread starts in server.start(), after the pipeline exists.
  options.on_bands = [&pipeline](std::vector<pitchwire::protocol::Band> bands) {
    if (pipeline) pipeline->set_bands(std::move(bands));
  };
  options.on_reference = [&pipeline](double reference_hz) {
    if (pipeline) pipeline->set_reference(reference_hz);
  };
  pw::Server server(options);
  server_for_problems = &server;
  SourceRelay relay(server);
  RecordingTee tee(server, recorder.get());

  // Whatever happens from here on (a port in use throws from server.start()), stop in the order that
  // keeps every thread's partners alive: audio, then analysis, then network.
  struct StopInOrder {
    pw::AudioSource& source;
    std::unique_ptr<pw::Pipeline>& pipeline;
    pw::Server& server;
    std::unique_ptr<pw::Recorder>& recorder;
    ~StopInOrder() {
      source.stop();
      if (pipeline) pipeline->stop();
      server.stop();
      if (recorder) recorder->stop();
    }
  } stop_in_order{*source, pipeline, server, recorder};

  source->start(ring, relay);
  server.set_audio_format({source->sample_rate_hz(), source->channel()});
  if (recorder) {
    recorder->set_sample_rate(source->sample_rate_hz());
    recorder->start();
    spdlog::info("session record in {}", recorder->folder().string());
    if (config.record_audio) {
      spdlog::info("recording the input audio to {} (consent given with --audio-consent)",
                   (recorder->folder() / "audio.wav").string());
    }
  }
  pipeline = std::make_unique<pw::Pipeline>(ring, *source, pipeline_options, tee);
  pipeline->start();
  clock.store(pipeline.get(), std::memory_order_release);
  server.start();

  const std::string host = config.bind.find(':') != std::string::npos ? "[" + config.bind + "]" : config.bind;
  const std::string base = "http://" + host + ":" + std::to_string(server.port()) + "/";
  spdlog::info("audio from {} at {} Hz; serving on port {}", source->describe(), source->sample_rate_hz(), server.port());
  std::cout << "pitchwired: live page " << base << "\n"
            << "pitchwired: supervisor page " << base << "?token=" << supervisor_token << "\n"
            << "pitchwired: WebSocket ws://" << host << ":" << server.port() << "/ws (subprotocol pitchwire.v1)"
            << std::endl;

  sd_notify(0, "READY=1");
  std::uint64_t watchdog_usec = 0;
  const bool watchdog = sd_watchdog_enabled(0, &watchdog_usec) > 0;
  const auto tick = watchdog ? std::chrono::microseconds(watchdog_usec / 2) : std::chrono::microseconds(500000);

  sigset_t signals;
  sigemptyset(&signals);
  sigaddset(&signals, SIGINT);
  sigaddset(&signals, SIGTERM);
  std::int64_t heartbeat = ring.written();
  int exit_code = 0;
  for (;;) {
    const auto secs = std::chrono::duration_cast<std::chrono::seconds>(tick);
    const timespec timeout{static_cast<time_t>(secs.count()),
                           static_cast<long>(std::chrono::duration_cast<std::chrono::nanoseconds>(tick - secs).count())};
    const int sig = sigtimedwait(&signals, nullptr, &timeout);
    if (sig == SIGINT || sig == SIGTERM) {
      spdlog::info("{}: stopping", sig == SIGINT ? "SIGINT" : "SIGTERM");
      break;
    }
    if (server.input_ended()) {
      spdlog::info("the input {} has ended: stopping", source->describe());
      break;
    }
    const std::int64_t now = ring.written();
    if (watchdog && (now != heartbeat || relay.device_lost())) sd_notify(0, "WATCHDOG=1");
    heartbeat = now;
  }
  sd_notify(0, "STOPPING=1");
  const auto t0 = std::chrono::steady_clock::now();
  source->stop();
  pipeline->stop();
  server.stop();
  if (recorder) recorder->stop();  // writes the summary; stop_in_order finds all four stopped
  spdlog::info("stopped in {} ms", std::chrono::duration_cast<std::chrono::milliseconds>(
                                       std::chrono::steady_clock::now() - t0).count());
  spdlog::shutdown();
  return exit_code;
}

}  // namespace

int main(int argc, char** argv) {
  // Block the stop signals before any thread exists, so that every thread inherits the mask and only
  // sigtimedwait in run() receives them.
  sigset_t signals;
  sigemptyset(&signals);
  sigaddset(&signals, SIGINT);
  sigaddset(&signals, SIGTERM);
  pthread_sigmask(SIG_BLOCK, &signals, nullptr);
  ::signal(SIGPIPE, SIG_IGN);
  // A file size limit reached by the session record fails that write (EFBIG, reported as a recording
  // problem) instead of ending the daemon.
  ::signal(SIGXFSZ, SIG_IGN);

  const pw::CommandLine cl = pw::parse_command_line(argc, argv);
  if (cl.exit_code) {
    (*cl.exit_code == 0 ? std::cout : std::cerr) << cl.message << (cl.message.empty() || cl.message.back() == '\n' ? "" : "\n");
    return *cl.exit_code;
  }
  if (cl.list_devices) {
    const auto devices = pw::list_input_devices();
    if (devices.empty()) {
      std::cout << "no audio input device found; use --input demo to run on the built-in demo voice\n";
      return 1;
    }
    for (const auto& line : devices) std::cout << line << "\n";
    return 0;
  }
  if (cl.check_config) {
    std::cout << pw::to_json_text(cl.config) << "\n";
    return 0;
  }
  try {
    set_up_logging(cl.config);
    return run(cl.config);
  } catch (const std::exception& e) {
    spdlog::error("{}", e.what());  // console and log file, one line
    spdlog::shutdown();
    return 1;
  }
}
