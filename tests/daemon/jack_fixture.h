// jack_fixture.h: a private JACK server and in-process JACK clients that play test voices, so that tests
// can capture from a "device" on a machine without sound hardware.
//
// JackServer runs `jackd --no-realtime -d dummy` under the server name in $JACK_DEFAULT_SERVER, which
// use_private_jack_server() sets for this process and its children to pitchwire-test-<pid>, so tests never
// touch a JACK server of the user's and parallel test processes never touch each other's. JackPlayer is a
// JACK client (the JACK C API; link libjack) with one output port per signal, each looping its signal.
//
// Thread contract: JackServer and JackPlayer are driven by the test's thread. JackPlayer's process
// callback runs on JACK's thread and only copies from buffers made before activation; its shutdown
// callback only sets an atomic flag.
#pragma once

#include <jack/jack.h>
#include <signal.h>
#include <spawn.h>
#include <sys/prctl.h>
#include <sys/types.h>
#include <sys/wait.h>
#include <unistd.h>

#include <fcntl.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cstdlib>
#include <fstream>
#include <sstream>
#include <string>
#include <thread>
#include <utility>
#include <vector>

extern char** environ;

namespace pitchwire::test {

// Sets JACK_DEFAULT_SERVER=pitchwire-test-<pid> and JACK_NO_AUDIO_RESERVATION=1 (no D-Bus device
// reservation: the dummy driver needs none) for this process and the programs it starts. Returns the name.
inline std::string use_private_jack_server() {
  const std::string name = "pitchwire-test-" + std::to_string(::getpid());
  ::setenv("JACK_DEFAULT_SERVER", name.c_str(), 1);
  ::setenv("JACK_NO_AUDIO_RESERVATION", "1", 1);
  return name;
}

// Runs a program with its output appended to log_path (or discarded when empty); returns its pid or -1.
inline pid_t spawn_program(const std::vector<std::string>& args, const std::string& log_path) {
  std::vector<char*> argv;
  for (const std::string& arg : args) argv.push_back(const_cast<char*>(arg.c_str()));
  argv.push_back(nullptr);
  posix_spawn_file_actions_t actions;
  posix_spawn_file_actions_init(&actions);
  const char* target = log_path.empty() ? "/dev/null" : log_path.c_str();
  posix_spawn_file_actions_addopen(&actions, STDOUT_FILENO, target, O_WRONLY | O_CREAT | O_APPEND, 0644);
  posix_spawn_file_actions_adddup2(&actions, STDOUT_FILENO, STDERR_FILENO);
  pid_t pid = -1;
  const int rc = posix_spawnp(&pid, argv[0], &actions, nullptr, argv.data(), environ);
  posix_spawn_file_actions_destroy(&actions);
  return rc == 0 ? pid : -1;
}

// The full path of a program found on $PATH, or empty.
inline std::string find_program(const std::string& name) {
  const char* path = std::getenv("PATH");
  std::stringstream dirs(path != nullptr ? path : "/usr/bin:/bin");
  std::string dir;
  while (std::getline(dirs, dir, ':')) {
    const std::string candidate = (dir.empty() ? "." : dir) + "/" + name;
    if (::access(candidate.c_str(), X_OK) == 0) return candidate;
  }
  return {};
}

// Like spawn_program, for a server: the child gets SIGTERM when the thread that started it ends
// (PR_SET_PDEATHSIG), so that a test that crashes leaves no server behind. Everything that allocates is
// done before fork(); the child only makes async-signal-safe calls.
inline pid_t spawn_server(const std::vector<std::string>& args, const std::string& log_path) {
  const std::string program = find_program(args.at(0));
  if (program.empty()) return -1;
  std::vector<char*> argv;
  for (const std::string& arg : args) argv.push_back(const_cast<char*>(arg.c_str()));
  argv.push_back(nullptr);
  const int log = ::open(log_path.c_str(), O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0644);
  if (log < 0) return -1;
  const pid_t parent = ::getpid();
  const pid_t pid = ::fork();
  if (pid == 0) {
    ::prctl(PR_SET_PDEATHSIG, SIGTERM);
    if (::getppid() != parent) ::_exit(127);  // the parent is already gone
    ::dup2(log, STDOUT_FILENO);
    ::dup2(log, STDERR_FILENO);
    ::execve(program.c_str(), argv.data(), environ);
    ::_exit(127);
  }
  ::close(log);
  return pid;
}

// Waits for pid to exit until the deadline; returns its wait status, or -1 if it is still running.
inline int wait_until(pid_t pid, std::chrono::steady_clock::time_point deadline) {
  for (;;) {
    int status = 0;
    const pid_t done = ::waitpid(pid, &status, WNOHANG);
    if (done == pid) return status;
    if (done < 0) return 0;  // not our child any more
    if (std::chrono::steady_clock::now() >= deadline) return -1;
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
}

// True when `jack_lsp` reaches the server named in $JACK_DEFAULT_SERVER (jack_lsp never starts one).
inline bool jack_server_answers() {
  const pid_t pid = spawn_program({"jack_lsp"}, "");
  if (pid < 0) return false;
  const int status = wait_until(pid, std::chrono::steady_clock::now() + std::chrono::seconds(10));
  if (status == -1) {
    ::kill(pid, SIGKILL);
    ::waitpid(pid, nullptr, 0);
    return false;
  }
  return WIFEXITED(status) && WEXITSTATUS(status) == 0;
}

class JackServer {
 public:
  JackServer(unsigned rate_hz, unsigned period_frames, std::string log_path)
      : rate_hz_(rate_hz), period_frames_(period_frames), log_path_(std::move(log_path)) {}
  ~JackServer() { stop(); }
  JackServer(const JackServer&) = delete;
  JackServer& operator=(const JackServer&) = delete;

  // Starts jackd and waits until it answers. Returns an empty string, or the problem with the end of
  // jackd's log.
  std::string start(std::chrono::seconds timeout = std::chrono::seconds(20)) {
    if (pid_ > 0) return {};
    pid_ = spawn_server({"jackd", "--no-realtime", "-d", "dummy", "-r", std::to_string(rate_hz_), "-p",
                          std::to_string(period_frames_)},
                         log_path_);
    if (pid_ < 0) return "cannot run jackd (install the Debian package jackd2)";
    const auto deadline = std::chrono::steady_clock::now() + timeout;
    while (std::chrono::steady_clock::now() < deadline) {
      int status = 0;
      if (::waitpid(pid_, &status, WNOHANG) == pid_) {
        pid_ = -1;
        const std::string log = log_tail();
        const std::string hint =
            log.find("Too many servers") == std::string::npos
                ? ""
                : " (jackd registers at most 8 server names in /dev/shm/jack-shm-registry, and a server "
                  "that dies with clients attached leaves its name there until a server of the same name "
                  "starts and stops again or /dev/shm is cleared)";
        return "jackd exited at once" + hint + ": " + log;
      }
      if (jack_server_answers()) return {};
      std::this_thread::sleep_for(std::chrono::milliseconds(50));
    }
    stop();
    return "jackd did not answer within the timeout: " + log_tail();
  }

  // Stops the jackd this object started (SIGTERM, then SIGKILL after 5 s) and waits for it.
  void stop() {
    if (pid_ <= 0) return;
    ::kill(pid_, SIGTERM);
    if (wait_until(pid_, std::chrono::steady_clock::now() + std::chrono::seconds(5)) == -1) {
      ::kill(pid_, SIGKILL);
      ::waitpid(pid_, nullptr, 0);
    }
    pid_ = -1;
  }

  [[nodiscard]] bool started() const { return pid_ > 0; }

  [[nodiscard]] std::string log_tail() const {
    std::ifstream in(log_path_);
    std::stringstream text;
    text << in.rdbuf();
    const std::string all = text.str();
    return all.size() > 1500 ? all.substr(all.size() - 1500) : all;
  }

 private:
  unsigned rate_hz_;
  unsigned period_frames_;
  std::string log_path_;
  pid_t pid_ = -1;
};

// A JACK client named `name` with output ports out_1, out_2, ... that loop the given signals (made at
// the server's rate) from the same position, so that signals of the same length stay sample-aligned.
class JackPlayer {
 public:
  JackPlayer(std::string name, std::vector<std::vector<float>> loops)
      : name_(std::move(name)), loops_(std::move(loops)), positions_(loops_.size(), 0) {}
  ~JackPlayer() { close(); }
  JackPlayer(const JackPlayer&) = delete;
  JackPlayer& operator=(const JackPlayer&) = delete;

  // Registers the client and its ports and activates it. Returns an empty string or the problem.
  std::string open() {
    close();
    jack_status_t status{};
    client_ = jack_client_open(name_.c_str(), static_cast<jack_options_t>(JackNoStartServer | JackUseExactName),
                               &status);
    if (client_ == nullptr) return "jack_client_open(" + name_ + ") failed, status " + std::to_string(status);
    shut_down_.store(false);
    ports_.clear();
    for (std::size_t i = 0; i < loops_.size(); ++i) {
      const std::string port = "out_" + std::to_string(i + 1);
      jack_port_t* handle = jack_port_register(client_, port.c_str(), JACK_DEFAULT_AUDIO_TYPE, JackPortIsOutput, 0);
      if (handle == nullptr) return "cannot register " + name_ + ":" + port;
      ports_.push_back(handle);
    }
    std::fill(positions_.begin(), positions_.end(), 0);
    jack_set_process_callback(client_, &JackPlayer::process, this);
    jack_on_shutdown(client_, &JackPlayer::on_shutdown, this);
    if (jack_activate(client_) != 0) return "cannot activate " + name_;
    return {};
  }

  // Closes the client (after the server died too, to free libjack's side).
  void close() {
    if (client_ == nullptr) return;
    if (!shut_down_.load()) jack_deactivate(client_);
    jack_client_close(client_);
    client_ = nullptr;
  }

  [[nodiscard]] bool is_open() const { return client_ != nullptr; }
  [[nodiscard]] bool shut_down() const { return shut_down_.load(); }
  [[nodiscard]] const std::string& name() const { return name_; }

 private:
  // JACK's process thread: copies the next nframes of every loop.
  static int process(jack_nframes_t nframes, void* arg) {
    auto& self = *static_cast<JackPlayer*>(arg);
    for (std::size_t p = 0; p < self.ports_.size(); ++p) {
      auto* out = static_cast<float*>(jack_port_get_buffer(self.ports_[p], nframes));
      const std::vector<float>& loop = self.loops_[p];
      std::size_t& position = self.positions_[p];
      for (jack_nframes_t i = 0; i < nframes; ++i) {
        out[i] = loop[position];
        if (++position == loop.size()) position = 0;
      }
    }
    return 0;
  }
  static void on_shutdown(void* arg) { static_cast<JackPlayer*>(arg)->shut_down_.store(true); }

  std::string name_;
  std::vector<std::vector<float>> loops_;
  std::vector<std::size_t> positions_;
  std::vector<jack_port_t*> ports_;
  jack_client_t* client_ = nullptr;
  std::atomic<bool> shut_down_{false};
};

}  // namespace pitchwire::test
