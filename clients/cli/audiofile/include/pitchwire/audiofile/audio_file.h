// audio_file.h: the file front end of pitchwire. Opens a sound file with libsndfile, checks it, and
// delivers it as blocks of mono samples (one selected channel, or the mean of all channels).
//
// Used by `pitchwire analyze`, and meant for replaying files through the daemon: memory use is one
// block, whatever the length of the file.
//
// Every problem with the input is reported as an AudioFileError whose message is one readable line
// without the path (the caller puts the path in front): "no such file", "is a directory",
// "not an audio file (format not recognised)", "no audio samples", "truncated: ...",
// "sample value NaN at 1.234567 s", "channel 3 out of range: the file has 2 channels", ...
#pragma once

#include <cstddef>
#include <cstdint>
#include <filesystem>
#include <memory>
#include <optional>
#include <span>
#include <stdexcept>
#include <string>
#include <vector>

namespace pitchwire::audiofile {

enum class Problem {
  kMissing,            // the path does not exist
  kDirectory,          // the path is a directory
  kCannotOpen,         // the system refused to open it (permissions, I/O error)
  kNotAudio,           // libsndfile does not recognise the format
  kUnsupported,        // recognised, but the encoding or variant is not supported or is malformed
  kEmpty,              // no audio samples
  kTruncated,          // fewer frames readable than the header declares
  kNonFinite,          // a NaN or infinite sample
  kChannelOutOfRange,  // the selected channel does not exist
};

class AudioFileError : public std::runtime_error {
 public:
  AudioFileError(Problem problem, const std::string& message);
  [[nodiscard]] Problem problem() const noexcept { return problem_; }

 private:
  Problem problem_;
};

struct AudioFileInfo {
  double sample_rate_hz = 0.0;
  int channels = 0;
  std::int64_t frames = 0;  // frames declared by the header (one frame = one sample per channel)
  std::string format;       // e.g. "WAV (Microsoft), Signed 16 bit PCM"

  [[nodiscard]] double duration_s() const {
    return sample_rate_hz > 0.0 ? static_cast<double>(frames) / sample_rate_hz : 0.0;
  }
};

struct ReadOptions {
  std::optional<int> channel;       // 1-based channel to read; empty: the mean of all channels
  std::size_t block_frames = 4096;  // frames per read_block(), at least 1
};

class AudioFileReader {
 public:
  // Opens and checks the file. Throws AudioFileError when it is missing, a directory, not audio,
  // unsupported, empty, visibly truncated (WAV/AIFF data chunk shorter than declared), or when the
  // channel is out of range.
  explicit AudioFileReader(const std::filesystem::path& path, const ReadOptions& options = {});
  ~AudioFileReader();
  AudioFileReader(AudioFileReader&&) noexcept;
  AudioFileReader& operator=(AudioFileReader&&) noexcept;
  AudioFileReader(const AudioFileReader&) = delete;
  AudioFileReader& operator=(const AudioFileReader&) = delete;

  [[nodiscard]] const AudioFileInfo& info() const;

  // The next block of mono samples (full scale = 1.0), at most block_frames long; empty at the end.
  // The span stays valid until the next call. Throws AudioFileError when the file ends before the
  // declared frame count (kTruncated) or holds a NaN or infinite sample (kNonFinite). In both cases
  // the good samples before the problem are returned first and the following call throws; once it
  // has thrown, every later call throws the same error.
  [[nodiscard]] std::span<const float> read_block();

  // Mono frames delivered so far.
  [[nodiscard]] std::int64_t frames_read() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

// Reads a whole file into memory (for short files and tests). Throws AudioFileError as above.
[[nodiscard]] std::vector<float> read_all(const std::filesystem::path& path, const ReadOptions& options = {});

}  // namespace pitchwire::audiofile
