// sample_ring.cpp: the bounded SPSC sample ring between the audio thread and the analysis thread.
// Thread contract: see audio_source.h (write: audio thread; read: analysis thread; counters: any).
#include "pitchwire/daemon/audio_source.h"

namespace pitchwire::daemon {

SampleRing::SampleRing(std::size_t capacity_samples)
    : queue_(capacity_samples), capacity_(capacity_samples) {}

void SampleRing::write(const float* samples, std::size_t count) noexcept {
  // spsc_queue::push copies what fits and returns how many: lock-free and allocation-free.
  const std::size_t pushed = queue_.push(samples, count);
  written_.fetch_add(static_cast<std::int64_t>(pushed), std::memory_order_relaxed);
  if (pushed < count) lost_.fetch_add(static_cast<std::int64_t>(count - pushed), std::memory_order_relaxed);
}

std::size_t SampleRing::read(float* out, std::size_t max_count) noexcept { return queue_.pop(out, max_count); }

}  // namespace pitchwire::daemon
