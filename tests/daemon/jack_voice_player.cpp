// jack_voice_player.cpp: pitchwire_jack_player, a JACK client that plays a synthetic voice of known F0 on
// one output port (NAME:out), for end-to-end tests and latency measurements of the daemon without sound
// hardware.
//
//   pitchwire_jack_player --name NAME [--f0 HZ | --steps HZ1,HZ2,...:SECONDS_EACH] [--seconds S]
//
// --f0 (default 220 Hz) loops a steady vowel (tests/daemon/jack_voice.h) until S seconds have been played,
// or until SIGTERM/SIGINT when --seconds is absent or 0. --steps plays a steady vowel at each F0 in turn,
// SECONDS_EACH long, rounded to whole JACK periods so that every change falls on the first sample of a
// period; the sequence repeats until S seconds (default: once through). For every step that starts, the
// player prints to stdout
//   step <index> <f0_hz> <steady_clock_ns>
// where index counts steps from 0 over the whole run and steady_clock_ns is std::chrono::steady_clock (in
// nanoseconds since its epoch) read when the process callback that wrote the step's first sample began;
// it is the same clock as the daemon's steady_clock on this machine. Lines are flushed one by one.
// Informational messages go to stderr; exit status 0 after a normal end, 1 on a problem, 2 on bad usage.
// The client is opened with JackNoStartServer and JackUseExactName: the player never starts a server,
// and a taken name is an error rather than a renamed client.
//
// Thread contract: main() parses, renders (before activation), then polls every 5 ms: it prints the step
// events, watches the time and the signal flag. The JACK process callback (JACK's thread) copies samples
// and pushes step events into a fixed single-producer/single-consumer ring: no allocation, lock or I/O.
// The signal handler and the shutdown callback only set atomic flags.
#include <jack/jack.h>

#include <algorithm>
#include <array>
#include <atomic>
#include <chrono>
#include <cmath>
#include <csignal>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <exception>
#include <string>
#include <thread>
#include <vector>

#include "jack_voice.h"

namespace {

volatile std::sig_atomic_t g_signalled = 0;

void on_signal(int /*signal*/) { g_signalled = 1; }

struct StepEvent {
  std::int64_t index = 0;
  double f0_hz = 0.0;
  std::int64_t steady_ns = 0;
};

// Single producer (the process callback), single consumer (main). A full ring drops events: main drains
// it every 5 ms and steps last far longer.
class EventRing {
 public:
  bool push(const StepEvent& event) {
    const std::size_t head = head_.load(std::memory_order_relaxed);
    const std::size_t next = (head + 1) % events_.size();
    if (next == tail_.load(std::memory_order_acquire)) return false;
    events_[head] = event;
    head_.store(next, std::memory_order_release);
    return true;
  }
  bool pop(StepEvent& event) {
    const std::size_t tail = tail_.load(std::memory_order_relaxed);
    if (tail == head_.load(std::memory_order_acquire)) return false;
    event = events_[tail];
    tail_.store((tail + 1) % events_.size(), std::memory_order_release);
    return true;
  }

 private:
  std::array<StepEvent, 256> events_{};
  std::atomic<std::size_t> head_{0};
  std::atomic<std::size_t> tail_{0};
};

struct Player {
  jack_port_t* port = nullptr;
  std::vector<float> samples;   // the loop (--f0) or all steps one after another (--steps)
  std::size_t position = 0;     // next sample of `samples` to play
  std::size_t frames_each = 0;  // --steps: samples per step; 0 for --f0
  std::vector<double> f0s;      // --steps: the F0 of each step
  std::int64_t steps_started = 0;
  std::atomic<std::int64_t> frames_played{0};
  std::atomic<bool> shut_down{false};
  EventRing events;
};

// JACK's process thread.
int process(jack_nframes_t nframes, void* arg) {
  auto& player = *static_cast<Player*>(arg);
  const std::int64_t now_ns =
      std::chrono::duration_cast<std::chrono::nanoseconds>(std::chrono::steady_clock::now().time_since_epoch()).count();
  auto* out = static_cast<float*>(jack_port_get_buffer(player.port, nframes));
  for (jack_nframes_t i = 0; i < nframes; ++i) {
    if (player.frames_each > 0 && player.position % player.frames_each == 0) {
      const std::size_t step = player.position / player.frames_each;
      player.events.push({player.steps_started++, player.f0s[step], now_ns});
    }
    out[i] = player.samples[player.position];
    if (++player.position == player.samples.size()) player.position = 0;
  }
  player.frames_played.fetch_add(nframes, std::memory_order_relaxed);
  return 0;
}

void on_shutdown(void* arg) { static_cast<Player*>(arg)->shut_down.store(true); }

int usage(const std::string& problem) {
  std::fprintf(stderr,
               "pitchwire_jack_player: %s\n"
               "usage: pitchwire_jack_player --name NAME [--f0 HZ | --steps HZ1,HZ2,...:SECONDS_EACH] [--seconds S]\n",
               problem.c_str());
  return 2;
}

bool parse_number(const std::string& text, double& value) {
  char* end = nullptr;
  value = std::strtod(text.c_str(), &end);
  return !text.empty() && end == text.c_str() + text.size() && std::isfinite(value);
}

}  // namespace

int main(int argc, char** argv) {
  std::string name;
  double f0_hz = 0.0;
  std::vector<double> steps;
  double seconds_each = 0.0;
  double seconds = -1.0;  // not given
  for (int i = 1; i < argc; ++i) {
    const std::string flag = argv[i];
    if (i + 1 >= argc) return usage(flag + " needs a value");
    const std::string value = argv[++i];
    if (flag == "--name") {
      name = value;
    } else if (flag == "--f0") {
      if (!parse_number(value, f0_hz) || f0_hz < 30.0 || f0_hz > 2000.0) return usage("--f0 must be 30..2000 Hz");
    } else if (flag == "--steps") {
      const auto colon = value.rfind(':');
      if (colon == std::string::npos || !parse_number(value.substr(colon + 1), seconds_each) || seconds_each < 0.05) {
        return usage("--steps must be HZ1,HZ2,...:SECONDS_EACH with SECONDS_EACH >= 0.05");
      }
      std::size_t start = 0;
      while (start <= colon) {
        const std::size_t comma = std::min(value.find(',', start), colon);
        double hz = 0.0;
        if (!parse_number(value.substr(start, comma - start), hz) || hz < 30.0 || hz > 2000.0) {
          return usage("every F0 in --steps must be 30..2000 Hz");
        }
        steps.push_back(hz);
        start = comma + 1;
      }
    } else if (flag == "--seconds") {
      if (!parse_number(value, seconds) || seconds < 0.0) return usage("--seconds must be a number >= 0");
    } else {
      return usage("unknown option " + flag);
    }
  }
  if (name.empty()) return usage("--name is required");
  if (f0_hz > 0.0 && !steps.empty()) return usage("give --f0 or --steps, not both");
  if (f0_hz <= 0.0 && steps.empty()) f0_hz = 220.0;

  jack_status_t status{};
  jack_client_t* client =
      jack_client_open(name.c_str(), static_cast<jack_options_t>(JackNoStartServer | JackUseExactName), &status);
  if (client == nullptr) {
    std::fprintf(stderr, "pitchwire_jack_player: cannot open JACK client %s: %s (status 0x%x)\n", name.c_str(),
                 (status & JackServerFailed) != 0 ? "no JACK server answers"
                                                  : "the server refused it; is the name taken?",
                 static_cast<unsigned>(status));
    return 1;
  }
  const double rate_hz = jack_get_sample_rate(client);
  const jack_nframes_t period = jack_get_buffer_size(client);

  Player player;
  try {
    if (steps.empty()) {
      player.samples = pitchwire::test::steady_vowel_loop(f0_hz, rate_hz);
    } else {
      const double periods = std::max(1.0, std::round(seconds_each * rate_hz / period));
      player.frames_each = static_cast<std::size_t>(periods) * period;
      player.f0s = steps;
      player.samples = pitchwire::test::vowel_steps(steps, rate_hz, player.frames_each);
      if (seconds < 0.0) seconds = static_cast<double>(player.samples.size()) / rate_hz;
    }
  } catch (const std::exception& e) {
    std::fprintf(stderr, "pitchwire_jack_player: cannot make the voice: %s\n", e.what());
    jack_client_close(client);
    return 1;
  }
  if (seconds < 0.0) seconds = 0.0;

  player.port = jack_port_register(client, "out", JACK_DEFAULT_AUDIO_TYPE, JackPortIsOutput, 0);
  if (player.port == nullptr) {
    std::fprintf(stderr, "pitchwire_jack_player: cannot register %s:out\n", name.c_str());
    jack_client_close(client);
    return 1;
  }
  jack_set_process_callback(client, &process, &player);
  jack_on_shutdown(client, &on_shutdown, &player);

  struct sigaction action {};
  action.sa_handler = &on_signal;
  sigemptyset(&action.sa_mask);
  sigaction(SIGTERM, &action, nullptr);
  sigaction(SIGINT, &action, nullptr);

  if (jack_activate(client) != 0) {
    std::fprintf(stderr, "pitchwire_jack_player: cannot activate %s\n", name.c_str());
    jack_client_close(client);
    return 1;
  }
  std::fprintf(stderr, "pitchwire_jack_player: playing on %s:out at %.0f Hz, %u frames per period\n", name.c_str(),
               rate_hz, static_cast<unsigned>(period));

  const auto total_frames = static_cast<std::int64_t>(std::llround(seconds * rate_hz));
  const auto drain = [&player] {
    StepEvent event;
    while (player.events.pop(event)) {
      std::printf("step %lld %g %lld\n", static_cast<long long>(event.index), event.f0_hz,
                  static_cast<long long>(event.steady_ns));
      std::fflush(stdout);
    }
  };
  int exit_code = 0;
  for (;;) {
    drain();
    if (g_signalled != 0) break;
    if (player.shut_down.load()) {
      std::fprintf(stderr, "pitchwire_jack_player: the JACK server shut the client down\n");
      exit_code = 1;
      break;
    }
    if (total_frames > 0 && player.frames_played.load(std::memory_order_relaxed) >= total_frames) break;
    std::this_thread::sleep_for(std::chrono::milliseconds(5));
  }
  if (!player.shut_down.load()) jack_deactivate(client);
  drain();
  jack_client_close(client);
  return exit_code;
}
