// audio_source.h: where the daemon's audio comes from, and the ring that carries it to analysis.
//
// Every source (a device through RtAudio, a file replayed in real time, the built-in demo voice) delivers
// mono float samples (full scale = 1.0) at a fixed rate into one SampleRing. The thread that writes the
// ring is the *audio thread*: a device's callback, or the pacing thread of a replayed file or the demo.
// It only copies and counts: no allocation, lock, log, or post to another thread.
//
// Thread contract:
//   SampleRing::write()                     audio thread only (the single producer)
//   SampleRing::read()                      analysis thread only (the single consumer)
//   SampleRing counters, AudioSource::xruns() any thread (atomics)
//   AudioSource::start()/stop()             the control (main) thread
//   SourceListener callbacks                a source's own monitor thread, never the audio thread
#pragma once

#include <atomic>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <stdexcept>
#include <string>
#include <vector>

#include <boost/lockfree/spsc_queue.hpp>

namespace pitchwire::daemon {

// A bounded lock-free single-producer/single-consumer queue of samples (boost::lockfree::spsc_queue).
// Samples that do not fit are dropped and counted: the audio thread never waits.
class SampleRing {
 public:
  explicit SampleRing(std::size_t capacity_samples);

  // Audio thread. Copies what fits; counts the rest as lost and records where in the stream they were
  // lost. Never blocks, never allocates.
  void write(const float* samples, std::size_t count) noexcept;

  // Analysis thread. Copies up to max_count samples out; returns how many. It never reads past the place
  // of a loss: there, take_loss() says how many samples are missing, so that the reader can put silence
  // of that length in their place and keep the stream on the capture clock.
  [[nodiscard]] std::size_t read(float* out, std::size_t max_count) noexcept;

  // Analysis thread. The number of samples lost at the current read position (0 when none), consumed.
  // Losses the ring could not place (more than kLossRecords lossy writes waiting) are returned at the
  // next call, a little early; the sum of all returns equals lost().
  [[nodiscard]] std::int64_t take_loss() noexcept;

  [[nodiscard]] std::size_t capacity() const noexcept { return capacity_; }
  [[nodiscard]] std::int64_t written() const noexcept { return written_.load(std::memory_order_relaxed); }
  [[nodiscard]] std::int64_t lost() const noexcept { return lost_.load(std::memory_order_relaxed); }

 private:
  struct Loss {
    std::int64_t position = 0;  // samples accepted before the loss
    std::int64_t count = 0;
  };
  static constexpr std::size_t kLossRecords = 64;

  boost::lockfree::spsc_queue<float> queue_;
  boost::lockfree::spsc_queue<Loss, boost::lockfree::capacity<kLossRecords>> losses_;
  std::size_t capacity_;
  std::int64_t accepted_ = 0;   // audio thread: samples accepted so far
  std::int64_t consumed_ = 0;   // analysis thread: samples read so far
  std::atomic<std::int64_t> unplaced_{0};  // lost samples whose record did not fit in losses_
  std::atomic<std::int64_t> written_{0};  // samples accepted into the ring (the audio heartbeat)
  std::atomic<std::int64_t> lost_{0};     // samples dropped because the ring was full
};

// A source could not be opened or started: one line naming the source and the problem.
class SourceError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

// Told when a source loses its device and when it comes back (from the source's monitor thread). The
// callbacks must return quickly and must not call the source's stop(), which joins that thread.
class SourceListener {
 public:
  virtual ~SourceListener() = default;
  virtual void on_device_lost(const std::string& device, const std::string& reason) = 0;
  virtual void on_device_back(const std::string& device) = 0;
};

// What a source is asked for. Filled from the daemon configuration.
struct SourceOptions {
  double sample_rate_hz = 48000.0;  // requested rate (a file plays at its own rate)
  unsigned buffer_frames = 256;     // frames per callback / per paced block
  int channel = 0;                  // 1-based input channel; 0 = the mean of all channels
  bool loop = true;                 // file replay: start again at the end
};

class AudioSource {
 public:
  virtual ~AudioSource() = default;

  // "demo", "file:PATH" or "device:NAME".
  [[nodiscard]] virtual std::string describe() const = 0;

  // Opens the source and starts writing into ring. Throws SourceError (one line) when it cannot.
  // After start(), sample_rate_hz() is the rate actually delivered.
  virtual void start(SampleRing& ring, SourceListener& listener) = 0;

  // Stops writing; returns once the audio thread no longer touches the ring. Safe to call twice.
  virtual void stop() noexcept = 0;

  [[nodiscard]] virtual double sample_rate_hz() const = 0;
  [[nodiscard]] virtual int channel() const = 0;  // as delivered: 1-based, or 0 for the mixdown

  // Device overruns reported by the driver (input overflow flags), counted by the audio thread.
  [[nodiscard]] virtual std::int64_t xruns() const { return 0; }

  // True once the source has no more samples to give (a file replayed without loop that has ended).
  [[nodiscard]] virtual bool finished() const { return false; }
};

// The sources. `make_device_source` is in device_source.cpp (RtAudio); the others in paced_source.cpp.
std::unique_ptr<AudioSource> make_demo_source(const SourceOptions& options);
std::unique_ptr<AudioSource> make_file_source(const std::string& path, const SourceOptions& options);
// name empty: the default input device. Otherwise the device whose name equals `name`, or else the only
// device whose name contains it (case-insensitive); ambiguous or absent names are a SourceError listing
// the input devices found.
std::unique_ptr<AudioSource> make_device_source(const std::string& name, const SourceOptions& options);

// One line per input device ("API/NAME (N ch, default rate R Hz)[, default]", where API/NAME can be given
// back as device:API/NAME), for --list-devices. An empty
// vector when there is none. Never throws: a failing backend is reported as a line of its own.
std::vector<std::string> list_input_devices();

}  // namespace pitchwire::daemon
