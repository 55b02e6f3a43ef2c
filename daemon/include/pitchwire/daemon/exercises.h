// exercises.h: exercise presets, read from a JSON file with comments (config/exercises.jsonc).
//
// A preset names an exercise the supervisor can start (start_exercise), with the target bands it sets when it
// starts and the measures that matter for it (listed for clients and reports). Band limits are written as a
// set_band request writes them (Hz, note names, semitones re the reference) and checked by the very same
// decoder, against the search range.
//
// Thread contract: load on the control thread at start; the result is plain values.
#pragma once

#include <filesystem>
#include <optional>
#include <stdexcept>
#include <string>
#include <vector>

#include "pitchwire/protocol/decode.h"
#include "pitchwire/protocol/messages.h"

namespace pitchwire::daemon {

struct ExercisePreset {
  std::string name;                    // what start_exercise names
  std::string label;                   // for people
  std::string description;
  std::vector<protocol::Band> bands;   // checked at load, limits in Hz against the configured reference
  std::vector<std::string> band_requests;  // the same as set_band requests, decoded again at each start
                                           // (semitone limits follow the reference of that moment)
  std::vector<std::string> measures;   // the measures that matter for it (names of stats members)
};

// Thrown with one line: "FILE: preset NAME: KEY: what is wrong and what is allowed".
class PresetError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

// The bands of `preset` decoded against `limits` (the reference and search range of that moment), as
// set_band requests are. Returns the first error, with the band's text in its message, if one is refused.
[[nodiscard]] std::optional<protocol::Error> decode_preset_bands(const ExercisePreset& preset,
                                                                const protocol::DecodeOptions& limits,
                                                                std::vector<protocol::Band>& bands);

// Reads and checks every preset of `file`. limits: reference and search range for the band limits.
[[nodiscard]] std::vector<ExercisePreset> load_exercise_presets(const std::filesystem::path& file,
                                                                const protocol::DecodeOptions& limits);

}  // namespace pitchwire::daemon
