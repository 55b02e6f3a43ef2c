// exercises.cpp: see exercises.h.
#include "pitchwire/daemon/exercises.h"

#include <fstream>
#include <nlohmann/json.hpp>
#include <set>
#include <sstream>

namespace pitchwire::daemon {
namespace {

// Measures a preset may list: the members of `stats` (docs/protocol.md) and of an exercise summary.
const std::set<std::string> kMeasures = {
    "voiced_fraction", "f0_p5_hz",    "f0_p50_hz",  "f0_p95_hz",       "f0_sd_st",       "f0_min_hz",
    "f0_max_hz",       "f0_range_st", "inside_fraction", "level_mean_dbfs", "level_max_dbfs", "voiced_s",
    "settled_s",       "duration_s",  "cycle_dose"};
constexpr std::size_t kMaxPresets = 32;

}  // namespace

std::optional<protocol::Error> decode_preset_bands(const ExercisePreset& preset, const protocol::DecodeOptions& limits,
                                                  std::vector<protocol::Band>& bands) {
  bands.clear();
  for (const std::string& text : preset.band_requests) {
    // Checked as a set_band request is: the same limits, notes, semitones and search range.
    const auto decoded = protocol::decode_request(text, limits);
    if (const auto* error = std::get_if<protocol::Error>(&decoded)) {
      protocol::Error named = *error;
      named.message = text + ": " + error->message;
      return named;
    }
    bands.push_back(std::get<protocol::SetBand>(std::get<protocol::Request>(decoded)).band);
  }
  return std::nullopt;
}

std::vector<ExercisePreset> load_exercise_presets(const std::filesystem::path& file,
                                                  const protocol::DecodeOptions& limits) {
  const std::string where = file.string() + ": ";
  std::ifstream in(file);
  if (!in) throw PresetError(where + "cannot be read");
  std::stringstream text;
  text << in.rdbuf();
  nlohmann::ordered_json root;  // presets in the file's order
  try {
    root = nlohmann::ordered_json::parse(text.str(), nullptr, true, /*ignore_comments=*/true);
  } catch (const nlohmann::ordered_json::parse_error& e) {
    throw PresetError(where + "not valid JSON: " + e.what());
  }
  if (!root.is_object() || root.empty()) throw PresetError(where + "must be an object of presets by name");
  if (root.size() > kMaxPresets) throw PresetError(where + "at most " + std::to_string(kMaxPresets) + " presets");
  std::vector<ExercisePreset> presets;
  for (const auto& [name, body] : root.items()) {
    const std::string at = where + "preset " + name + ": ";
    if (name.empty() || name.size() > protocol::kMaxPresetChars ||
        name.find_first_not_of("abcdefghijklmnopqrstuvwxyz0123456789_") != std::string::npos) {
      throw PresetError(at + "names are 1 to " + std::to_string(protocol::kMaxPresetChars) +
                        " characters of a-z, 0-9 and _");
    }
    if (!body.is_object()) throw PresetError(at + "must be an object");
    ExercisePreset p;
    p.name = name;
    for (const auto& [key, value] : body.items()) {
      if (key == "label" || key == "description") {
        if (!value.is_string()) throw PresetError(at + key + ": must be text");
        (key == "label" ? p.label : p.description) = value.get<std::string>();
      } else if (key == "bands") {
        if (!value.is_array()) throw PresetError(at + "bands: must be a list of {name, low, high}");
        for (const auto& band : value) {
          nlohmann::ordered_json request = band.is_object() ? band : nlohmann::ordered_json::object();
          request["type"] = "set_band";
          request["id"] = "preset";
          p.band_requests.push_back(request.dump());
        }
        if (const auto error = decode_preset_bands(p, limits, p.bands)) throw PresetError(at + "bands: " + error->message);
      } else if (key == "measures") {
        if (!value.is_array()) throw PresetError(at + "measures: must be a list of names");
        for (const auto& m : value) {
          if (!m.is_string() || !kMeasures.count(m.get<std::string>())) {
            std::string known;
            for (const auto& k : kMeasures) known += (known.empty() ? "" : ", ") + k;
            throw PresetError(at + "measures: " + m.dump() + " is not one of " + known);
          }
          p.measures.push_back(m.get<std::string>());
        }
      } else {
        throw PresetError(at + key + ": unknown key (allowed: label, description, bands, measures)");
      }
    }
    if (p.label.empty()) throw PresetError(at + "label: missing");
    presets.push_back(std::move(p));
  }
  return presets;
}

}  // namespace pitchwire::daemon
