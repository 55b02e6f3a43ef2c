// Tests of the exercise presets (daemon/exercises.h): the shipped file, and one clear error per kind of
// mistake, naming the file, the preset and the key.
#include "pitchwire/daemon/exercises.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <cmath>
#include <fstream>
#include <string>

namespace pitchwire::daemon {
namespace {

namespace fs = std::filesystem;

protocol::DecodeOptions limits() {
  protocol::DecodeOptions o;
  o.reference_hz = 100.0;
  o.f0_min_hz = 50.0;
  o.f0_max_hz = 1400.0;
  return o;
}

TEST(ExercisePresets, TheShippedFileHasTheFourExercisesWithTheirBands) {
  const auto presets = load_exercise_presets(fs::path(PITCHWIRE_SOURCE_DIR) / "config" / "exercises.jsonc", limits());
  ASSERT_EQ(presets.size(), 4u);
  std::vector<std::string> names;
  for (const auto& p : presets) names.push_back(p.name);
  EXPECT_EQ(names, (std::vector<std::string>{"sustained_vowel", "pitch_glide", "reading", "conversation"}));
  const ExercisePreset& vowel = presets[0];
  EXPECT_EQ(vowel.label, "Sustained vowel");
  ASSERT_EQ(vowel.bands.size(), 1u);
  EXPECT_EQ(vowel.bands[0].name, "target");
  // -1 and +1 semitone around 100 Hz: 100 * 2^(-1/12) = 94.387 Hz, 100 * 2^(1/12) = 105.946 Hz
  // (equal temperament, ISO 16 convention for the semitone; common practice).
  EXPECT_NEAR(vowel.bands[0].low_hz, 94.387, 0.001);
  EXPECT_NEAR(vowel.bands[0].high_hz, 105.946, 0.001);
  EXPECT_TRUE(presets[1].bands.empty());
  for (const auto& p : presets) EXPECT_FALSE(p.measures.empty()) << p.name;
}

struct TempFile {
  fs::path path;
  explicit TempFile(const std::string& text) {
    std::string tmpl = (fs::temp_directory_path() / "pitchwire-presets-XXXXXX").string();
    const int fd = ::mkstemp(tmpl.data());
    ::close(fd);
    path = tmpl;
    std::ofstream(path) << text;
  }
  ~TempFile() {
    std::error_code ec;
    fs::remove(path, ec);
  }
};

std::string error_of(const std::string& text) {
  const TempFile f(text);
  try {
    (void)load_exercise_presets(f.path, limits());
  } catch (const PresetError& e) {
    const std::string message = e.what();
    EXPECT_EQ(message.rfind(f.path.string() + ": ", 0), 0u) << message;  // names the file first
    return message.substr(f.path.string().size() + 2);
  }
  return "(no error)";
}

TEST(ExercisePresets, EachMistakeGetsOneLineNamingPresetKeyAndProblem) {
  EXPECT_EQ(error_of(R"({"hum": {"label": "Hum", "colour": "red"}})"),
            "preset hum: colour: unknown key (allowed: label, description, bands, measures)");
  EXPECT_EQ(error_of(R"({"Hum!": {"label": "Hum"}})"), "preset Hum!: names are 1 to 64 characters of a-z, 0-9 and _");
  EXPECT_EQ(error_of(R"({"hum": {"description": "no label"}})"), "preset hum: label: missing");
  EXPECT_NE(error_of(R"({"hum": {"label": "Hum", "bands": [{"name": "t", "low": "H3", "high": "E4"}]}})")
                .find("preset hum: bands: "),
            std::string::npos);
  EXPECT_NE(error_of(R"({"hum": {"label": "Hum", "bands": [{"name": "t", "low": "E4", "high": "A3"}]}})")
                .find("low"),
            std::string::npos);
  EXPECT_EQ(error_of(R"({"hum": {"label": "Hum", "measures": ["loudness"]}})").rfind("preset hum: measures: \"loudness\" is not one of", 0),
            0u);
  EXPECT_EQ(error_of("{ not json").rfind("not valid JSON", 0), 0u);
  EXPECT_EQ(error_of("[]"), "must be an object of presets by name");
  EXPECT_THROW((void)load_exercise_presets("/nonexistent/exercises.jsonc", limits()), PresetError);
}

}  // namespace
}  // namespace pitchwire::daemon
