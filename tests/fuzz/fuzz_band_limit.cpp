// fuzz_band_limit.cpp: libFuzzer target for band limits as people type them (Hz, note names such as "C#4",
// semitones such as "-2.5st"; protocol/src/decode.cpp parse_band_limit). A limit that parses is a finite
// frequency above zero.
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <string_view>

#include "pitchwire/protocol/decode.h"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  const std::string_view text(reinterpret_cast<const char*>(data), size);
  for (const double reference_hz : {100.0, 195.998, 440.0}) {
    if (const auto hz = pitchwire::protocol::parse_band_limit(text, reference_hz)) {
      if (!std::isfinite(*hz) || *hz <= 0.0) std::abort();
    }
  }
  return 0;
}
