// fuzz_audio_file.cpp: libFuzzer target for the audio file front end (clients/cli/audiofile): libsndfile and
// our checks for truncated files and non-finite samples. Any file gives samples or an AudioFileError, never
// a crash; samples handed out are finite.
#include <unistd.h>

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <string>

#include "pitchwire/audiofile/audio_file.h"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  static const std::string path = "/tmp/pitchwire-fuzz-audio-" + std::to_string(::getpid());
  if (std::FILE* f = std::fopen(path.c_str(), "wb")) {
    std::fwrite(data, 1, size, f);
    std::fclose(f);
  } else {
    return 0;
  }
  try {
    pitchwire::audiofile::ReadOptions options;
    options.block_frames = 512;
    pitchwire::audiofile::AudioFileReader reader(path, options);
    for (int blocks = 0; blocks < 4096; ++blocks) {  // bounded: a header may declare a huge length
      const auto block = reader.read_block();
      if (block.empty()) break;
      for (const float x : block) {
        if (!std::isfinite(x)) std::abort();
      }
    }
  } catch (const pitchwire::audiofile::AudioFileError&) {
  }
  return 0;
}
