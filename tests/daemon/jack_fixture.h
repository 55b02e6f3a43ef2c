// jack_fixture.h: a private JACK server and JACK player processes, so that tests can capture from a
// "device" on a machine without sound hardware.
//
// JackServer runs `jackd --no-realtime -d dummy -r RATE -p PERIOD` under the server name that
// use_private_jack_server() puts in $JACK_DEFAULT_SERVER (pitchwire-test-<pid>) for this process and its
// children, so tests never touch a JACK server of the user's and parallel test processes never touch each
// other's. jackd keeps a server name registered in /dev/shm/jack-shm-registry (8 names at most per
// machine) when it is stopped while clients are attached; starting and stopping it again without clients
// under the same name releases the entry, and a test suite should end that way.
//
// JackTestLock serialises the JACK parts of test processes of one user: jackd2 names a client's
// notification socket after the client alone (/dev/shm/jack_<client>_<uid>_0), not after its server, so
// clients of the same name on two servers of one user clash (one removes the other's socket), and RtAudio
// always calls its probing clients RtApiJackCount and RtApiJackInfo. Any test program that runs JACK
// clients should hold it while it does (it is released when the process ends, however it ends).
//
// JackPlayer is a JACK client (the JACK C API; link libjack) with output ports out_1, out_2, ... that loop
// signals made at the server's rate. Tests run each player in a process of its own (JackPlayerProcess),
// as real JACK clients are: libjack 1.9.21 deadlocks when clients of a dead server are closed from two
// threads of one process at once, and RtAudio closes its client from a thread of its own when the server
// goes away. JackPlayerProcess starts the test program itself again with PITCHWIRE_TEST_JACK_PLAYER set;
// a test program that uses it calls run_jack_player_if_asked() during static initialisation, which then
// plays until SIGTERM or until the server goes away, and exits without running any test.
//
// Thread contract: everything here is driven by the test's main thread, except JackPlayer's callbacks:
// the process callback runs on JACK's thread and only copies from buffers made before activation; the
// shutdown callback only sets an atomic flag.
#pragma once

#include <dirent.h>
#include <fcntl.h>
#include <jack/jack.h>
#include <signal.h>
#include <spawn.h>
#include <sys/file.h>
#include <sys/prctl.h>
#include <sys/types.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <csignal>
#include <cstdio>
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

// Runs a program found on $PATH with its output discarded; returns its pid or -1.
inline pid_t spawn_quiet(const std::vector<std::string>& args) {
  std::vector<char*> argv;
  for (const std::string& arg : args) argv.push_back(const_cast<char*>(arg.c_str()));
  argv.push_back(nullptr);
  posix_spawn_file_actions_t actions;
  posix_spawn_file_actions_init(&actions);
  posix_spawn_file_actions_addopen(&actions, STDOUT_FILENO, "/dev/null", O_WRONLY, 0);
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

// Runs `program` (a path) with this process's environment plus `extra_env` ("NAME=value") and its
// output appended to log_path. The child gets SIGTERM when the thread that started it ends
// (PR_SET_PDEATHSIG), so that a test that crashes leaves no server or player behind. Everything that
// allocates is done before fork(); the child only makes async-signal-safe calls. Returns the pid or -1.
inline pid_t spawn_child(const std::string& program, const std::vector<std::string>& args,
                         const std::vector<std::string>& extra_env, const std::string& log_path) {
  std::vector<char*> argv;
  for (const std::string& arg : args) argv.push_back(const_cast<char*>(arg.c_str()));
  argv.push_back(nullptr);
  std::vector<char*> envp;
  for (char** e = environ; *e != nullptr; ++e) envp.push_back(*e);
  for (const std::string& e : extra_env) envp.push_back(const_cast<char*>(e.c_str()));
  envp.push_back(nullptr);
  const int log = ::open(log_path.c_str(), O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0644);
  if (log < 0) return -1;
  const pid_t parent = ::getpid();
  const pid_t pid = ::fork();
  if (pid == 0) {
    ::prctl(PR_SET_PDEATHSIG, SIGTERM);
    if (::getppid() != parent) ::_exit(127);  // the parent is already gone
    ::dup2(log, STDOUT_FILENO);
    ::dup2(log, STDERR_FILENO);
    ::execve(program.c_str(), argv.data(), envp.data());
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

// Ends a child: SIGTERM, then SIGKILL after `grace`; waits for it either way.
inline void end_child(pid_t pid, std::chrono::seconds grace = std::chrono::seconds(5)) {
  if (pid <= 0) return;
  ::kill(pid, SIGTERM);
  if (wait_until(pid, std::chrono::steady_clock::now() + grace) == -1) {
    ::kill(pid, SIGKILL);
    ::waitpid(pid, nullptr, 0);
  }
}

// True when `jack_lsp` reaches the server named in $JACK_DEFAULT_SERVER (jack_lsp never starts one).
inline bool jack_server_answers() {
  const pid_t pid = spawn_quiet({"jack_lsp"});
  if (pid < 0) return false;
  const int status = wait_until(pid, std::chrono::steady_clock::now() + std::chrono::seconds(10));
  if (status == -1) {
    ::kill(pid, SIGKILL);
    ::waitpid(pid, nullptr, 0);
    return false;
  }
  return WIFEXITED(status) && WEXITSTATUS(status) == 0;
}

inline std::string file_tail(const std::string& path, std::size_t max_chars = 1500) {
  std::ifstream in(path);
  std::stringstream text;
  text << in.rdbuf();
  const std::string all = text.str();
  return all.size() > max_chars ? all.substr(all.size() - max_chars) : all;
}

// See the top of this file. Waits up to `timeout` for the lock; ok() says whether it was taken.
class JackTestLock {
 public:
  explicit JackTestLock(std::chrono::seconds timeout = std::chrono::seconds(300)) {
    const std::string path = "/tmp/pitchwire-jack-tests-" + std::to_string(::getuid()) + ".lock";
    fd_ = ::open(path.c_str(), O_RDWR | O_CREAT | O_CLOEXEC, 0600);
    if (fd_ < 0) return;
    const auto deadline = std::chrono::steady_clock::now() + timeout;
    while (::flock(fd_, LOCK_EX | LOCK_NB) != 0) {
      if (std::chrono::steady_clock::now() >= deadline) {
        ::close(fd_);
        fd_ = -1;
        return;
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(50));
    }
    locked_ = true;
  }
  ~JackTestLock() {
    if (fd_ >= 0) ::close(fd_);
  }
  JackTestLock(const JackTestLock&) = delete;
  JackTestLock& operator=(const JackTestLock&) = delete;
  [[nodiscard]] bool ok() const { return locked_; }

 private:
  int fd_ = -1;
  bool locked_ = false;
};

// Removes what a jackd of this name stopped with clients attached leaves in /dev/shm: the semaphores of
// its clients (jack_sem.<uid>_<server>_<client>) and its socket (jack_<server>_<uid>_0). Call it only
// once that server has ended.
inline void remove_jack_leftovers(const std::string& server_name) {
  const std::string uid = std::to_string(::getuid());
  const std::string semaphores = "jack_sem." + uid + "_" + server_name + "_";
  const std::string socket = "jack_" + server_name + "_" + uid + "_";
  DIR* dir = ::opendir("/dev/shm");
  if (dir == nullptr) return;
  std::vector<std::string> doomed;
  while (const dirent* entry = ::readdir(dir)) {
    const std::string name = entry->d_name;
    if (name.rfind(semaphores, 0) == 0 || name.rfind(socket, 0) == 0) doomed.push_back("/dev/shm/" + name);
  }
  ::closedir(dir);
  for (const std::string& path : doomed) ::unlink(path.c_str());
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
    const std::string jackd = find_program("jackd");
    if (jackd.empty()) return "jackd is not installed (Debian package jackd2)";
    pid_ = spawn_child(jackd,
                       {"jackd", "--no-realtime", "-d", "dummy", "-r", std::to_string(rate_hz_), "-p",
                        std::to_string(period_frames_)},
                       {}, log_path_);
    if (pid_ < 0) return "cannot run " + jackd;
    const auto deadline = std::chrono::steady_clock::now() + timeout;
    while (std::chrono::steady_clock::now() < deadline) {
      int status = 0;
      if (::waitpid(pid_, &status, WNOHANG) == pid_) {
        pid_ = -1;
        const std::string log = file_tail(log_path_);
        const std::string hint = log.find("Too many servers") == std::string::npos
                                     ? ""
                                     : " (jackd registers at most 8 server names in /dev/shm/jack-shm-registry; "
                                       "see the top of tests/daemon/jack_fixture.h)";
        return "jackd exited at once" + hint + ": " + log;
      }
      if (jack_server_answers()) return {};
      std::this_thread::sleep_for(std::chrono::milliseconds(50));
    }
    stop();
    return "jackd did not answer within the timeout: " + file_tail(log_path_);
  }

  // Stops the jackd this object started and waits for it.
  void stop() {
    end_child(pid_);
    pid_ = -1;
  }

  [[nodiscard]] bool started() const { return pid_ > 0; }
  [[nodiscard]] std::string log_tail() const { return file_tail(log_path_); }

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
    jack_status_t status{};
    client_ = jack_client_open(name_.c_str(), static_cast<jack_options_t>(JackNoStartServer | JackUseExactName),
                               &status);
    if (client_ == nullptr) return "jack_client_open(" + name_ + ") failed, status " + std::to_string(status);
    for (std::size_t i = 0; i < loops_.size(); ++i) {
      if (loops_[i].empty()) return "signal " + std::to_string(i + 1) + " is empty";
      const std::string port = "out_" + std::to_string(i + 1);
      jack_port_t* handle = jack_port_register(client_, port.c_str(), JACK_DEFAULT_AUDIO_TYPE, JackPortIsOutput, 0);
      if (handle == nullptr) return "cannot register " + name_ + ":" + port;
      ports_.push_back(handle);
    }
    jack_set_process_callback(client_, &JackPlayer::process, this);
    jack_on_shutdown(client_, &JackPlayer::on_shutdown, this);
    if (jack_activate(client_) != 0) return "cannot activate " + name_;
    return {};
  }

  void close() {
    if (client_ == nullptr) return;
    if (!shut_down_.load()) jack_deactivate(client_);
    jack_client_close(client_);
    client_ = nullptr;
  }

  [[nodiscard]] bool shut_down() const { return shut_down_.load(); }

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

inline bool write_samples(const std::string& path, const std::vector<float>& samples) {
  std::FILE* file = std::fopen(path.c_str(), "wb");
  if (file == nullptr) return false;
  const bool ok = std::fwrite(samples.data(), sizeof(float), samples.size(), file) == samples.size();
  return std::fclose(file) == 0 && ok;
}

inline std::vector<float> read_samples(const std::string& path) {
  std::vector<float> samples;
  std::FILE* file = std::fopen(path.c_str(), "rb");
  if (file == nullptr) return samples;
  float block[4096];
  std::size_t n = 0;
  while ((n = std::fread(block, sizeof(float), 4096, file)) > 0) samples.insert(samples.end(), block, block + n);
  std::fclose(file);
  return samples;
}

namespace detail {
inline volatile std::sig_atomic_t g_player_terminated = 0;
inline void on_player_sigterm(int /*signal*/) { g_player_terminated = 1; }
}  // namespace detail

// The player process's whole life, when PITCHWIRE_TEST_JACK_PLAYER names a client: ports playing the
// files of raw float samples listed (':'-separated) in PITCHWIRE_TEST_JACK_PLAYER_LOOPS, the file named by
// PITCHWIRE_TEST_JACK_PLAYER_READY created once the client is active; exit status 0 after SIGTERM, 1 when
// the server went away or on a problem. Returns 0 at once (and does nothing) when the variable is unset.
inline int run_jack_player_if_asked() {
  const char* name = std::getenv("PITCHWIRE_TEST_JACK_PLAYER");
  if (name == nullptr) return 0;
  const char* loop_list = std::getenv("PITCHWIRE_TEST_JACK_PLAYER_LOOPS");
  const char* ready = std::getenv("PITCHWIRE_TEST_JACK_PLAYER_READY");
  std::vector<std::vector<float>> loops;
  std::stringstream files(loop_list != nullptr ? loop_list : "");
  std::string file;
  while (std::getline(files, file, ':')) loops.push_back(read_samples(file));

  struct sigaction action {};
  action.sa_handler = &detail::on_player_sigterm;
  sigemptyset(&action.sa_mask);
  sigaction(SIGTERM, &action, nullptr);

  JackPlayer player(name, std::move(loops));
  const std::string problem = player.open();
  if (!problem.empty()) {
    std::fprintf(stderr, "jack player %s: %s\n", name, problem.c_str());
    std::_Exit(1);
  }
  if (ready != nullptr) {
    if (std::FILE* mark = std::fopen(ready, "w")) std::fclose(mark);
  }
  while (detail::g_player_terminated == 0 && !player.shut_down()) {
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
  if (player.shut_down()) std::_Exit(1);  // nothing left to close cleanly
  player.close();
  std::_Exit(0);
}

// A JackPlayer in a process of its own (see the top of this file).
class JackPlayerProcess {
 public:
  // loop_files: raw float samples at the server's rate (write_samples), one file per output port.
  JackPlayerProcess(std::string name, std::vector<std::string> loop_files, std::string work_dir)
      : name_(std::move(name)), loop_files_(std::move(loop_files)), work_dir_(std::move(work_dir)) {}
  ~JackPlayerProcess() { stop(); }
  JackPlayerProcess(const JackPlayerProcess&) = delete;
  JackPlayerProcess& operator=(const JackPlayerProcess&) = delete;

  // Starts the player and waits until its client is active. Returns an empty string or the problem.
  std::string start(std::chrono::seconds timeout = std::chrono::seconds(20)) {
    stop();
    char self[4096] = {};
    const ssize_t length = ::readlink("/proc/self/exe", self, sizeof self - 1);
    if (length <= 0) return "cannot find this program (/proc/self/exe)";
    const std::string ready = work_dir_ + "/" + name_ + ".ready";
    const std::string log = work_dir_ + "/" + name_ + ".log";
    std::remove(ready.c_str());
    std::string loops;
    for (const std::string& file : loop_files_) loops += (loops.empty() ? "" : ":") + file;
    pid_ = spawn_child(std::string(self, static_cast<std::size_t>(length)), {name_},
                       {"PITCHWIRE_TEST_JACK_PLAYER=" + name_, "PITCHWIRE_TEST_JACK_PLAYER_LOOPS=" + loops,
                        "PITCHWIRE_TEST_JACK_PLAYER_READY=" + ready},
                       log);
    if (pid_ < 0) return "cannot start the player process " + name_;
    const auto deadline = std::chrono::steady_clock::now() + timeout;
    while (std::chrono::steady_clock::now() < deadline) {
      if (::access(ready.c_str(), F_OK) == 0) return {};
      int status = 0;
      if (::waitpid(pid_, &status, WNOHANG) == pid_) {
        pid_ = -1;
        return "the player process " + name_ + " ended: " + file_tail(log);
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    }
    stop();
    return "the player process " + name_ + " was not ready within the timeout: " + file_tail(log);
  }

  // Ends the player (it may have ended already, when its server went away) and waits for it.
  void stop() {
    end_child(pid_);
    pid_ = -1;
  }

  // False once the process has ended (it ends when its server goes away).
  [[nodiscard]] bool running() {
    if (pid_ <= 0) return false;
    int status = 0;
    if (::waitpid(pid_, &status, WNOHANG) == pid_) {
      pid_ = -1;
      return false;
    }
    return true;
  }

 private:
  std::string name_;
  std::vector<std::string> loop_files_;
  std::string work_dir_;
  pid_t pid_ = -1;
};

}  // namespace pitchwire::test
