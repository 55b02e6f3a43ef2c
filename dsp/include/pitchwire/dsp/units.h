// units.h: pitch units. Pure functions, no state, callable from any thread.
//
// Definitions (sources in docs/measures.md):
//   semitones re ref  = 12 * log2(f / ref)
//   cents re ref      = 1200 * log2(f / ref)
//   MIDI note number  = 69 + 12 * log2(f / 440)        (A4 = 440 Hz, ISO 16:1975)
// Note names use scientific pitch notation (C4 = MIDI 60) with sharps: C C# D D# E F F# G G# A A# B.
#pragma once

#include <optional>
#include <string>
#include <string_view>

namespace pitchwire::dsp {

inline constexpr double kA4Hz = 440.0;

[[nodiscard]] double semitones(double f_hz, double ref_hz);
[[nodiscard]] double cents(double f_hz, double ref_hz);
[[nodiscard]] double hz_from_semitones(double st, double ref_hz);
[[nodiscard]] double midi_from_hz(double f_hz);
[[nodiscard]] double hz_from_midi(double midi);

// Nearest equal-tempered note and the offset from it, e.g. 446 Hz -> {"A4", 69, +23.5 cents}.
struct NoteReading {
  std::string name;
  int midi = 0;
  double cents_off = 0.0;
};
[[nodiscard]] NoteReading nearest_note(double f_hz);

// Parses "A4", "C#3", "Db5", "e2" (letter, optional # or b, octave -1..9). Empty on anything else.
[[nodiscard]] std::optional<double> hz_from_note_name(std::string_view name);
[[nodiscard]] std::string note_name(int midi);

}  // namespace pitchwire::dsp
