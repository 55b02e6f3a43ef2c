// decode.h: turns a client's text message into a typed Request, or into an Error to send back.
// Never throws: any input, of any size or shape, gives one or the other.
//
// Thread contract: any thread; no shared state.
#pragma once

#include <cstddef>
#include <optional>
#include <string_view>
#include <variant>

#include "pitchwire/protocol/messages.h"

namespace pitchwire::protocol {

struct DecodeOptions {
  std::size_t max_message_bytes = kDefaultMaxMessageBytes;  // longer texts are rejected before parsing
  double reference_hz = 100.0;  // band limits given in semitones are re this frequency
  double f0_min_hz = 50.0;      // band limits must lie within the search range
  double f0_max_hz = 1400.0;
};

using Decoded = std::variant<Request, Error>;

// Checks, in this order: size, JSON syntax, object, `type`, `id` (from then on errors carry the id),
// unknown members, then each member of the type. The first problem found is reported.
[[nodiscard]] Decoded decode_request(std::string_view text, const DecodeOptions& options = {}) noexcept;

// A band limit written as text, in Hz: a note name ("A3", "C#4", "Db5", A4 = 440 Hz) or semitones re the
// reference ("-2st", "+3.5 st"). Empty when the text is neither, or when it is no finite frequency above 0
// ("+1e33 st"). (A JSON number is a limit in Hz.)
[[nodiscard]] std::optional<double> parse_band_limit(std::string_view text, double reference_hz);

}  // namespace pitchwire::protocol
