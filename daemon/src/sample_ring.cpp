// sample_ring.cpp: the bounded SPSC sample ring between the audio thread and the analysis thread.
// Thread contract: see audio_source.h (write: audio thread; read: analysis thread; counters: any).
#include "pitchwire/daemon/audio_source.h"

#include <algorithm>

namespace pitchwire::daemon {

SampleRing::SampleRing(std::size_t capacity_samples)
    : queue_(capacity_samples), capacity_(capacity_samples) {}

void SampleRing::write(const float* samples, std::size_t count) noexcept {
  // spsc_queue::push copies what fits and returns how many: lock-free and allocation-free.
  const std::size_t pushed = queue_.push(samples, count);
  accepted_ += static_cast<std::int64_t>(pushed);
  written_.fetch_add(static_cast<std::int64_t>(pushed), std::memory_order_relaxed);
  if (pushed < count) {
    const auto lost = static_cast<std::int64_t>(count - pushed);
    // A record per lossy write, so the reader sees every loss at once; while the ring stays full they
    // share a position. When kLossRecords are waiting, the count is kept without a place.
    if (!losses_.push(Loss{accepted_, lost})) unplaced_.fetch_add(lost, std::memory_order_relaxed);
    lost_.fetch_add(lost, std::memory_order_relaxed);
  }
}

std::size_t SampleRing::read(float* out, std::size_t max_count) noexcept {
  if (!losses_.empty()) {
    // Stop at the next loss: the samples after it must come after its silence.
    const std::int64_t until = losses_.front().position - consumed_;
    max_count = std::min(max_count, static_cast<std::size_t>(std::max<std::int64_t>(0, until)));
  }
  const std::size_t n = queue_.pop(out, max_count);
  consumed_ += static_cast<std::int64_t>(n);
  return n;
}

std::int64_t SampleRing::take_loss() noexcept {
  std::int64_t count = unplaced_.exchange(0, std::memory_order_relaxed);
  while (!losses_.empty() && losses_.front().position <= consumed_) {
    count += losses_.front().count;
    losses_.pop();
  }
  return count;
}

}  // namespace pitchwire::daemon
