// device_source.cpp: live capture from a sound device through RtAudio 5.2 (Debian's librtaudio-dev, built
// with JACK, PulseAudio and ALSA), and finding the device again when it goes away and comes back.
//
// Which device a name means (make_device_source):
//   - APIs are searched in the order RtAudio::getCompiledApi() gives: JACK, PulseAudio, ALSA on Debian.
//     JACK has devices only while a JACK server runs, so it comes first exactly when someone runs one.
//     Looking never starts a server: RtAudio 5.2 opens every JACK client it makes (to count, to probe, to
//     stream) with JackNoStartServer; tests/daemon/test_device_source.cpp checks this with a ~/.jackdrc
//     that would leave a mark if a server were started.
//   - "API/NAME" (API one of RtAudio::getApiName's names: jack, pulse, alsa) searches that API only.
//   - An empty NAME is the default input device of the first API that has an input device (RtAudio's
//     default flag; when no device of that API carries it, its first input device).
//   - Otherwise a device whose name equals NAME, in the first API that has one; else the devices whose
//     names contain NAME ignoring case, in the first API that has any, and there must be exactly one.
//     Substrings are matched per API because one sound card shows up under PulseAudio and under ALSA with
//     different names: a fragment such as "USB" would otherwise always be ambiguous.
//   - From then on the device is called "API/NAME" (describe() is "device:jack/system"; the listener and
//     list_input_devices() use the same form), so every name shown can be given back as it is.
//   - Device indices are not stable (a JACK client or a USB card that comes and goes renumbers the
//     others): the index is looked up by name again right before every open.
//
// Thread contract:
//   audio thread     on_audio(), RtAudio's callback: copies the chosen channel, or the mean of all channels
//                    through a scratch buffer (sized before the stream starts), into the ring, and counts
//                    frames and input overflows in atomics; it drops a buffer that the driver failed to
//                    refill. No allocation, lock, log or post.
//   RtAudio threads  on_rtaudio_error<slot>(): RtAudio 5.2 calls it from whichever thread meets the error,
//                    the audio thread included; it only bumps atomics in the source's error slot.
//   monitor thread   monitor(), started by start(); while it runs it is the only user of the RtAudio
//                    object. It polls the stream; when the device is lost it calls
//                    SourceListener::on_device_lost, closes the stream, retries with backoff, reopens the
//                    device found again by name on the same ring and calls SourceListener::on_device_back.
//   control thread   make_device_source(), list_input_devices(), start(), stop(), the destructor. start()
//                    opens the stream before the monitor exists and stop() joins the monitor before it
//                    closes the stream, so the RtAudio object never has two users of ours at once. (RtAudio
//                    adds one of its own for JACK: see kJackSelfCloseLimit.)
#include <RtAudio.h>

#include <algorithm>
#include <array>
#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <memory>
#include <mutex>
#include <string>
#include <thread>
#include <utility>
#include <vector>

#include "pitchwire/daemon/audio_source.h"

namespace pitchwire::daemon {
namespace {

using Clock = std::chrono::steady_clock;
using namespace std::chrono_literals;

// The JACK client name of a capture stream; JACK appends "-01", "-02"... when several are open.
constexpr const char* kClientName = "pitchwire";

// How often the monitor looks at the stream; the loss of a device is noticed within this (or within the
// silence limit when the driver says nothing).
constexpr auto kPollInterval = 50ms;
// A running stream that delivers nothing for longer than this has lost its device.
constexpr auto kSilenceLimit = 1s;
// A driver that keeps warning (ALSA reports a read error from an unplugged card as a warning, on every
// pass of its loop) this many times within a second has lost its device too.
constexpr std::uint32_t kWarningsPerSecondLimit = 10;
// Waits before each reopening attempt; the last one repeats.
constexpr std::array<std::chrono::milliseconds, 4> kBackoff = {250ms, 500ms, 1000ms, 2000ms};
// RtAudio closes a JACK stream by itself, from a thread it spawns, when the server shuts its client down.
// Closing that stream here as well would close the client twice, and libjack (1.9.21) deadlocks when
// clients of a dead server are closed, or opened, from two threads at once. So while a JACK stream still
// counts as running but no longer calls back, nothing here calls into JACK: RtAudio's close is awaited
// until the stream stops running (RtAudio has closed it), the callback runs again (the server is alive,
// so no shutdown is coming) or the limit passes. The monitor then closes the stream anyway (a shutdown
// that late is not coming); stop() instead detaches the callback and leaves the stream and its RtAudio
// object to RtAudio, so as to return promptly without risking the double close.
constexpr auto kJackSelfCloseLimit = 10s;
constexpr auto kJackSelfCloseLimitOnStop = 250ms;

// The rates the pitch tracker accepts (dsp::TrackerConfig::sample_rate_hz).
constexpr unsigned kMinTrackerRate = 8000;
constexpr unsigned kMaxTrackerRate = 96000;

// ---------------------------------------------------------------------------------------------------
// Error slots. RtAudio 5.2's error callback is a plain function pointer without user data, so each
// source gets a callback of its own: an instance of on_rtaudio_error<slot> that writes to its slot.
// Sources beyond kErrorSlots share the last slot; their monitors then judge by their own stream's state.

constexpr std::size_t kErrorSlots = 16;

struct ErrorSlot {
  std::atomic<bool> claimed{false};
  std::atomic<std::uint32_t> errors{0};    // anything but a warning: RtAudio has aborted the stream
  std::atomic<std::uint32_t> warnings{0};
  std::atomic<int> last_error{RtAudioError::UNSPECIFIED};
};

std::array<ErrorSlot, kErrorSlots + 1> g_error_slots;

template <std::size_t Slot>
void on_rtaudio_error(RtAudioError::Type type, const std::string& /*text: copying it would allocate*/) {
  ErrorSlot& slot = g_error_slots[Slot];
  if (type == RtAudioError::WARNING || type == RtAudioError::DEBUG_WARNING) {
    slot.warnings.fetch_add(1, std::memory_order_relaxed);
  } else {
    slot.last_error.store(type, std::memory_order_relaxed);
    slot.errors.fetch_add(1, std::memory_order_release);
  }
}

template <std::size_t... Slots>
constexpr std::array<RtAudioErrorCallback, sizeof...(Slots)> make_error_callbacks(std::index_sequence<Slots...>) {
  return {{&on_rtaudio_error<Slots>...}};
}
constexpr auto kErrorCallbacks = make_error_callbacks(std::make_index_sequence<kErrorSlots + 1>());

std::size_t claim_error_slot() noexcept {
  for (std::size_t i = 0; i < kErrorSlots; ++i) {
    bool expected = false;
    if (g_error_slots[i].claimed.compare_exchange_strong(expected, true)) return i;
  }
  return kErrorSlots;
}

void release_error_slot(std::size_t slot) noexcept {
  if (slot < kErrorSlots) g_error_slots[slot].claimed.store(false);
}

const char* error_type_text(int type) {
  switch (type) {
    case RtAudioError::NO_DEVICES_FOUND: return "no devices found";
    case RtAudioError::INVALID_DEVICE: return "invalid device";
    case RtAudioError::MEMORY_ERROR: return "memory error";
    case RtAudioError::INVALID_PARAMETER: return "invalid parameter";
    case RtAudioError::INVALID_USE: return "invalid use";
    case RtAudioError::DRIVER_ERROR: return "driver error";
    case RtAudioError::SYSTEM_ERROR: return "system error";
    case RtAudioError::THREAD_ERROR: return "thread error";
    default: return "unspecified error";
  }
}

// ---------------------------------------------------------------------------------------------------
// Devices.

std::string lower(std::string text) {
  for (char& c : text) {
    if (c >= 'A' && c <= 'Z') c = static_cast<char>(c - 'A' + 'a');
  }
  return text;
}

// RtAudio's messages may span lines and start with blank ones; a SourceError is one line.
std::string one_line(const std::string& text) {
  std::string out;
  for (const char c : text) {
    if (c == '\n' || c == '\r' || c == '\t') {
      if (!out.empty() && out.back() != ' ') out += ' ';
    } else {
      out += c;
    }
  }
  while (!out.empty() && out.back() == ' ') out.pop_back();
  return out;
}

std::string api_name(RtAudio::Api api) { return RtAudio::getApiName(api); }

// The compiled APIs in RtAudio's own preference order, without the placeholder ones.
std::vector<RtAudio::Api> search_order() {
  std::vector<RtAudio::Api> compiled;
  RtAudio::getCompiledApi(compiled);
  std::vector<RtAudio::Api> apis;
  for (const RtAudio::Api api : compiled) {
    if (api != RtAudio::UNSPECIFIED && api != RtAudio::RTAUDIO_DUMMY) apis.push_back(api);
  }
  return apis;
}

struct InputDevice {
  RtAudio::Api api = RtAudio::UNSPECIFIED;
  unsigned index = 0;  // valid only until the devices change: look it up again before opening
  std::string name;
  unsigned channels = 0;
  unsigned preferred_rate = 0;
  std::vector<unsigned> rates;
  bool is_default = false;

  [[nodiscard]] std::string qualified_name() const { return api_name(api) + "/" + name; }
  [[nodiscard]] unsigned default_rate() const {
    if (preferred_rate > 0) return preferred_rate;
    return rates.empty() ? 0 : rates.back();
  }
};

std::unique_ptr<RtAudio> open_api(RtAudio::Api api) {
  auto rt = std::make_unique<RtAudio>(api);
  // Warnings are printed to stderr until a stream has an error callback; a daemon reports through its
  // listener and its own errors instead.
  rt->showWarnings(false);
  return rt;
}

// The input devices of one API, in RtAudio's order. Throws RtAudioError when the backend fails.
std::vector<InputDevice> input_devices(RtAudio& rt) {
  std::vector<InputDevice> devices;
  const unsigned count = rt.getDeviceCount();
  for (unsigned i = 0; i < count; ++i) {
    RtAudio::DeviceInfo info;
    try {
      info = rt.getDeviceInfo(i);
    } catch (const RtAudioError&) {
      continue;  // gone between counting and asking (RtAudio recounts on every call)
    }
    if (!info.probed || info.inputChannels == 0) continue;
    InputDevice device;
    device.api = rt.getCurrentApi();
    device.index = i;
    device.name = info.name;
    device.channels = info.inputChannels;
    device.preferred_rate = info.preferredSampleRate;
    device.rates = info.sampleRates;
    std::sort(device.rates.begin(), device.rates.end());
    device.is_default = info.isDefaultInput;
    devices.push_back(std::move(device));
  }
  return devices;
}

struct ApiScan {
  RtAudio::Api api = RtAudio::UNSPECIFIED;
  std::unique_ptr<RtAudio> rt;
  std::vector<InputDevice> devices;
  std::string problem;  // set when the backend failed
};

ApiScan scan(RtAudio::Api api) {
  ApiScan result;
  result.api = api;
  try {
    result.rt = open_api(api);
    result.devices = input_devices(*result.rt);
  } catch (const std::exception& e) {
    result.problem = one_line(e.what());
    if (result.problem.empty()) result.problem = "unknown error";
  }
  return result;
}

// The rate offered by the device nearest to the one asked for, among those the tracker accepts when
// there are any (a device offering only 192 kHz still gets opened, and the pipeline says why it fails).
unsigned choose_rate(const InputDevice& device, double requested_hz) {
  const auto wanted = static_cast<long>(requested_hz + 0.5);
  std::vector<unsigned> usable;
  for (const unsigned rate : device.rates) {
    if (rate >= kMinTrackerRate && rate <= kMaxTrackerRate) usable.push_back(rate);
  }
  if (usable.empty()) usable = device.rates;
  if (usable.empty()) return device.preferred_rate > 0 ? device.preferred_rate : static_cast<unsigned>(wanted);
  unsigned best = usable.front();
  for (const unsigned rate : usable) {
    const long distance = std::labs(static_cast<long>(rate) - wanted);
    const long best_distance = std::labs(static_cast<long>(best) - wanted);
    if (distance < best_distance || (distance == best_distance && rate > best)) best = rate;
  }
  return best;
}

std::string short_listing(const std::vector<ApiScan>& scans) {
  std::string text;
  for (const ApiScan& scan : scans) {
    for (const InputDevice& device : scan.devices) {
      if (!text.empty()) text += ", ";
      text += device.qualified_name() + " (" + std::to_string(device.channels) + " ch)";
    }
  }
  return text;
}

std::string no_device_message(const std::vector<RtAudio::Api>& tried) {
  std::string names;
  for (const RtAudio::Api api : tried) names += (names.empty() ? "" : ", ") + api_name(api);
  return "no audio input device found (tried: " + names +
         "); use --input demo to run on the built-in demo voice";
}

struct FoundDevice {
  std::unique_ptr<RtAudio> rt;  // of the device's API, to open it with
  InputDevice device;
};

// The name rule described at the top of this file. Throws SourceError.
FoundDevice find_device(const std::string& text) {
  std::vector<RtAudio::Api> apis = search_order();
  std::string name = text;
  if (const auto slash = text.find('/'); slash != std::string::npos) {
    const RtAudio::Api api = RtAudio::getCompiledApiByName(lower(text.substr(0, slash)));
    if (api != RtAudio::UNSPECIFIED && api != RtAudio::RTAUDIO_DUMMY) {
      apis = {api};
      name = text.substr(slash + 1);
    }
  }
  const std::string shown = "device:" + text;

  std::vector<ApiScan> scans;
  for (const RtAudio::Api api : apis) {
    ApiScan& scanned = scans.emplace_back(scan(api));
    if (name.empty()) {
      if (scanned.devices.empty()) continue;
      const auto chosen = std::find_if(scanned.devices.begin(), scanned.devices.end(),
                                       [](const InputDevice& device) { return device.is_default; });
      InputDevice device = chosen != scanned.devices.end() ? *chosen : scanned.devices.front();
      return {std::move(scanned.rt), std::move(device)};
    }
    for (const InputDevice& device : scanned.devices) {
      if (device.name == name) return {std::move(scanned.rt), device};
    }
  }

  const bool none = std::all_of(scans.begin(), scans.end(), [](const ApiScan& s) { return s.devices.empty(); });
  if (none) throw SourceError(name.empty() ? no_device_message(apis) : shown + ": " + no_device_message(apis));

  const std::string needle = lower(name);
  for (ApiScan& scanned : scans) {
    std::vector<const InputDevice*> matches;
    for (const InputDevice& device : scanned.devices) {
      if (lower(device.name).find(needle) != std::string::npos) matches.push_back(&device);
    }
    if (matches.size() == 1) return {std::move(scanned.rt), *matches.front()};
    if (matches.size() > 1) {
      std::string names;
      for (const InputDevice* device : matches) names += (names.empty() ? "" : ", ") + device->qualified_name();
      throw SourceError(shown + ": the name is ambiguous, it matches " + names +
                        " (give the whole name); input devices: " + short_listing(scans));
    }
  }
  throw SourceError(shown + ": no input device has this name or a name containing it; input devices: " +
                    short_listing(scans));
}

// ---------------------------------------------------------------------------------------------------

// Everything the audio callback touches besides the ring. It is on the heap, apart from the source, so
// that stop() can leave a stream whose closing is RtAudio's to RtAudio together with this state (see
// kJackSelfCloseLimit): the callback then sees `detached` and touches nothing else.
struct CallbackState {
  SampleRing* ring = nullptr;
  std::size_t channels = 1;         // channels per frame in the callback (1 when one channel is chosen)
  std::vector<float> scratch;       // the mean of the channels, one buffer at a time
  std::size_t error_slot = kErrorSlots;
  std::uint32_t warnings_seen = 0;  // the audio thread's copy of its slot's warning count
  std::atomic<std::int64_t> frames{0};  // frames delivered: the heartbeat
  std::atomic<std::int64_t> xruns{0};
  std::atomic<int> in_callback{0};  // with `detached`, lets stop() know no callback still runs
  std::atomic<bool> detached{false};
};

class DeviceSource final : public AudioSource {
 public:
  DeviceSource(std::unique_ptr<RtAudio> rt, InputDevice device, const SourceOptions& options)
      : rt_(std::move(rt)),
        device_(std::move(device)),
        options_(options),
        description_("device:" + device_.qualified_name()),
        rate_hz_(choose_rate(device_, options.sample_rate_hz)),
        owned_state_(std::make_unique<CallbackState>()),
        state_(owned_state_.get()) {
    state_->error_slot = claim_error_slot();
  }

  ~DeviceSource() override {
    DeviceSource::stop();
    // A stream left to RtAudio may still report errors through the slot: then it stays claimed.
    if (owned_state_) release_error_slot(state_->error_slot);
  }

  DeviceSource(const DeviceSource&) = delete;
  DeviceSource& operator=(const DeviceSource&) = delete;

  [[nodiscard]] std::string describe() const override { return description_; }

  // Control thread.
  void start(SampleRing& ring, SourceListener& listener) override {
    if (monitor_.joinable()) throw SourceError(description_ + ": already started");
    if (!rt_) throw SourceError(description_ + ": cannot start again, RtAudio is still closing its last stream");
    state_->ring = &ring;
    listener_ = &listener;
    {
      const std::lock_guard lock(wake_mutex_);
      stop_requested_ = false;
    }
    open_stream(static_cast<unsigned>(rate_hz_ + 0.5));
    try {
      monitor_ = std::thread([this] { monitor(); });
    } catch (const std::exception& e) {
      close_stream();
      throw SourceError(description_ + ": cannot start the monitor thread: " + e.what());
    }
  }

  // Control thread.
  void stop() noexcept override {
    {
      const std::lock_guard lock(wake_mutex_);
      stop_requested_ = true;
    }
    wake_.notify_all();
    if (monitor_.joinable()) monitor_.join();
    if (!rt_) return;
    if (device_.api == RtAudio::UNIX_JACK) {
      // A healthy stream calls back every period; allow a few of them before suspecting anything.
      const auto period = std::chrono::duration<double>(static_cast<double>(stream_frames_) / rate_hz_);
      const auto limit = std::max<Clock::duration>(
          kJackSelfCloseLimitOnStop, std::chrono::duration_cast<Clock::duration>(3 * period));
      if (!await_jack_self_close(limit, false)) {
        leave_to_rtaudio();
        return;
      }
    }
    close_stream();
  }

  [[nodiscard]] double sample_rate_hz() const override { return rate_hz_; }
  [[nodiscard]] int channel() const override { return options_.channel; }
  [[nodiscard]] std::int64_t xruns() const override { return state_->xruns.load(std::memory_order_relaxed); }

 private:
  // What the monitor compares against on each poll.
  struct Watch {
    std::int64_t frames = 0;
    Clock::time_point progress;  // when frames last grew
    std::uint32_t errors = 0;
    std::uint32_t warnings = 0;  // at the start of the current one-second window
    Clock::time_point warning_window;
  };

  // Audio thread.
  static int on_audio(void* /*output*/, void* input, unsigned int frames, double /*stream_time*/,
                      RtAudioStreamStatus status, void* user) noexcept {
    auto& state = *static_cast<CallbackState*>(user);
    // Sequentially consistent with leave_to_rtaudio(): either this call sees `detached`, or that
    // function sees this call in progress and waits for it.
    state.in_callback.fetch_add(1);
    if (!state.detached.load()) {
      if ((status & RTAUDIO_INPUT_OVERFLOW) != 0) state.xruns.fetch_add(1, std::memory_order_relaxed);
      // PulseAudio and ALSA call back first and read the device afterwards, and a failed read is only a
      // warning: a warning since the last call means this buffer was not refilled. Dropping it keeps a
      // failing driver, which then calls back as fast as it can, from filling the ring with a stale
      // buffer.
      bool stale = false;
      if (state.error_slot < kErrorSlots) {
        const std::uint32_t warnings = g_error_slots[state.error_slot].warnings.load(std::memory_order_relaxed);
        stale = warnings != state.warnings_seen;
        state.warnings_seen = warnings;
      }
      if (input != nullptr && !stale) {
        const auto* samples = static_cast<const float*>(input);
        if (state.channels == 1) {
          state.ring->write(samples, frames);
        } else {
          write_mean(state, samples, frames);
        }
      }
      state.frames.fetch_add(frames, std::memory_order_relaxed);
    }
    state.in_callback.fetch_sub(1);
    return 0;
  }

  // Audio thread. Interleaved frames -> their mean, through the scratch buffer in pieces of its size,
  // so that a callback larger than planned still allocates nothing.
  static void write_mean(CallbackState& state, const float* samples, std::size_t frames) noexcept {
    const std::size_t channels = state.channels;
    const float scale = 1.0f / static_cast<float>(channels);
    float* out = state.scratch.data();
    while (frames > 0) {
      const std::size_t n = std::min(frames, state.scratch.size());
      for (std::size_t i = 0; i < n; ++i) {
        float sum = 0.0f;
        for (std::size_t c = 0; c < channels; ++c) sum += samples[i * channels + c];
        out[i] = sum * scale;
      }
      state.ring->write(out, n);
      samples += n * channels;
      frames -= n;
    }
  }

  // Control thread (start) or monitor thread (reopening). Finds the device by name, opens it at `rate`
  // and starts it. Throws SourceError.
  void open_stream(unsigned rate) {
    std::vector<InputDevice> devices;
    try {
      devices = input_devices(*rt_);
    } catch (const std::exception& e) {
      throw SourceError(description_ + ": cannot list the devices: " + one_line(e.what()));
    }
    const auto found = std::find_if(devices.begin(), devices.end(),
                                    [this](const InputDevice& d) { return d.name == device_.name; });
    if (found == devices.end()) throw SourceError(description_ + ": the device is not there");
    if (options_.channel < 0 || static_cast<unsigned>(options_.channel) > found->channels) {
      throw SourceError(description_ + ": channel " + std::to_string(options_.channel) + " asked for, the device has " +
                        std::to_string(found->channels) + " input channel(s)");
    }

    RtAudio::StreamParameters input;
    input.deviceId = found->index;
    input.nChannels = options_.channel > 0 ? 1u : found->channels;
    input.firstChannel = options_.channel > 0 ? static_cast<unsigned>(options_.channel - 1) : 0u;
    unsigned int frames = std::max(1u, options_.buffer_frames);
    RtAudio::StreamOptions stream_options;
    stream_options.streamName = kClientName;
    try {
      // Until a stream is open RtAudio throws; from then on its errors go to the error callback.
      rt_->openStream(nullptr, &input, RTAUDIO_FLOAT32, rate, &frames, &DeviceSource::on_audio, state_,
                      &stream_options, kErrorCallbacks[state_->error_slot]);
    } catch (const std::exception& e) {
      throw SourceError(description_ + ": cannot open it: " + one_line(e.what()));
    }

    // Read by the audio thread; written only while no stream runs.
    state_->channels = input.nChannels;
    if (state_->channels > 1) {
      state_->scratch.assign(std::max<std::size_t>({frames, options_.buffer_frames, 64}), 0.0f);
    }
    state_->warnings_seen = g_error_slots[state_->error_slot].warnings.load(std::memory_order_relaxed);
    stream_frames_ = frames;
    const unsigned delivered = rt_->getStreamSampleRate();
    if (delivered > 0) rate_hz_ = delivered;

    rt_->startStream();
    if (!rt_->isStreamRunning()) {
      close_stream();
      throw SourceError(description_ + ": the stream did not start");
    }
  }

  // Control or monitor thread. Best effort: RtAudio frees the stream in closeStream() whatever happened.
  // For a JACK stream, only once await_jack_self_close() has said so.
  void close_stream() noexcept {
    try {
      if (rt_->isStreamRunning()) rt_->abortStream();
      if (rt_->isStreamOpen()) rt_->closeStream();
    } catch (const std::exception&) {
      // Errors of a stream with an error callback are reported there; nothing is left to undo here.
    }
  }

  // Control or monitor thread, JACK only: see kJackSelfCloseLimit. Waits, without calling into JACK,
  // while the stream counts as running and the callback does not run, up to `limit`. True when
  // close_stream() may go ahead: RtAudio has closed the stream itself, the callback runs (the server is
  // alive) or, for the monitor (interruptible), the limit has passed; false when the limit passed for
  // stop(), or when stop() is asked for during the monitor's wait.
  bool await_jack_self_close(Clock::duration limit, bool interruptible) {
    const auto deadline = Clock::now() + limit;
    const std::int64_t frames = state_->frames.load(std::memory_order_relaxed);
    while (rt_->isStreamRunning()) {
      if (state_->frames.load(std::memory_order_relaxed) != frames) return true;
      if (Clock::now() >= deadline) return interruptible;
      if (interruptible) {
        if (wait_or_stop(20ms)) return false;
      } else {
        std::this_thread::sleep_for(5ms);
      }
    }
    return true;
  }

  // Control thread: the end of stop() when RtAudio may still be closing the stream. The callback is
  // detached (it returns at once from now on, and none is left running when this returns), and the
  // RtAudio object and the callback state are left to RtAudio's closing thread, never freed.
  void leave_to_rtaudio() noexcept {
    state_->detached.store(true);
    const auto deadline = Clock::now() + 1s;
    while (state_->in_callback.load() != 0 && Clock::now() < deadline) std::this_thread::yield();
    (void)rt_.release();
    (void)owned_state_.release();
  }

  // Monitor thread. True when stop() was asked for (at once, or during the wait).
  bool wait_or_stop(std::chrono::milliseconds duration) {
    std::unique_lock lock(wake_mutex_);
    return wake_.wait_for(lock, duration, [this] { return stop_requested_; });
  }

  Watch fresh_watch() const {
    Watch watch;
    const auto now = Clock::now();
    watch.frames = state_->frames.load(std::memory_order_relaxed);
    watch.progress = now;
    watch.errors = g_error_slots[state_->error_slot].errors.load(std::memory_order_acquire);
    watch.warnings = g_error_slots[state_->error_slot].warnings.load(std::memory_order_relaxed);
    watch.warning_window = now;
    return watch;
  }

  // Monitor thread. Why the device counts as lost, or empty while it is fine.
  std::string check(Watch& watch) {
    const auto now = Clock::now();
    const std::size_t slot_index = state_->error_slot;
    const ErrorSlot& slot = g_error_slots[slot_index];

    const std::uint32_t errors = slot.errors.load(std::memory_order_acquire);
    if (errors != watch.errors) {
      watch.errors = errors;
      // A shared slot may carry another source's error; the checks below judge this stream itself.
      if (slot_index < kErrorSlots) {
        return std::string("the driver reported a ") + error_type_text(slot.last_error.load(std::memory_order_relaxed));
      }
    }
    if (!rt_->isStreamRunning()) {
      return device_.api == RtAudio::UNIX_JACK ? "the JACK server closed the stream" : "the stream stopped";
    }
    const std::int64_t frames = state_->frames.load(std::memory_order_relaxed);
    if (frames != watch.frames) {
      watch.frames = frames;
      watch.progress = now;
    } else if (now - watch.progress > kSilenceLimit) {
      return "no audio for more than 1 s";
    }
    const std::uint32_t warnings = slot.warnings.load(std::memory_order_relaxed);
    if (slot_index < kErrorSlots && warnings - watch.warnings >= kWarningsPerSecondLimit) {
      return "the driver keeps reporting errors";
    }
    if (now - watch.warning_window >= 1s) {
      watch.warnings = warnings;
      watch.warning_window = now;
    }
    return {};
  }

  // Monitor thread.
  void monitor() {
    Watch watch = fresh_watch();
    while (!wait_or_stop(kPollInterval)) {
      const std::string reason = check(watch);
      if (reason.empty()) continue;
      listener_->on_device_lost(description_, reason);
      if (device_.api == RtAudio::UNIX_JACK && !await_jack_self_close(kJackSelfCloseLimit, true)) return;
      close_stream();
      if (!reopen()) return;
      listener_->on_device_back(description_);
      watch = fresh_watch();
    }
  }

  // Monitor thread. Retries until the device opens again (true) or stop() is asked for (false). The
  // rate stays the one delivered so far, because the analysis runs at one rate: a device that comes back
  // only at another rate stays lost.
  bool reopen() {
    const auto rate = static_cast<unsigned>(rate_hz_ + 0.5);
    for (std::size_t attempt = 0;; ++attempt) {
      if (wait_or_stop(kBackoff[std::min(attempt, kBackoff.size() - 1)])) return false;
      try {
        open_stream(rate);
        return true;
      } catch (const std::exception&) {
        // Still away (or not usable yet): try again after the next wait.
      }
    }
  }

  std::unique_ptr<RtAudio> rt_;  // null once left to RtAudio by stop()
  const InputDevice device_;     // as found by make_device_source(); its index is looked up again per open
  const SourceOptions options_;
  const std::string description_;
  double rate_hz_;               // planned before start(), delivered after
  unsigned stream_frames_ = 0;   // frames per callback of the open stream

  std::unique_ptr<CallbackState> owned_state_;  // null once left to RtAudio by stop()
  CallbackState* const state_;                  // valid for the source's life either way

  SourceListener* listener_ = nullptr;
  std::thread monitor_;
  std::mutex wake_mutex_;
  std::condition_variable wake_;
  bool stop_requested_ = false;  // guarded by wake_mutex_
};

}  // namespace

std::unique_ptr<AudioSource> make_device_source(const std::string& name, const SourceOptions& options) {
  FoundDevice found = find_device(name);
  const std::string shown = "device:" + found.device.qualified_name();
  if (options.channel < 0 || static_cast<unsigned>(options.channel) > found.device.channels) {
    throw SourceError(shown + ": channel " + std::to_string(options.channel) + " asked for, the device has " +
                      std::to_string(found.device.channels) + " input channel(s)");
  }
  return std::make_unique<DeviceSource>(std::move(found.rt), std::move(found.device), options);
}

std::vector<std::string> list_input_devices() {
  std::vector<std::string> lines;
  try {
    for (const RtAudio::Api api : search_order()) {
      const ApiScan scanned = scan(api);
      if (!scanned.problem.empty()) {
        lines.push_back(api_name(api) + ": cannot list devices: " + scanned.problem);
        continue;
      }
      for (const InputDevice& device : scanned.devices) {
        lines.push_back(device.qualified_name() + " (" + std::to_string(device.channels) + " ch, default rate " +
                        std::to_string(device.default_rate()) + " Hz)" + (device.is_default ? ", default" : ""));
      }
    }
  } catch (const std::exception&) {
    // Out of memory while formatting: what was listed so far is still worth showing.
  }
  return lines;
}

}  // namespace pitchwire::daemon
