// units.cpp: see units.h for the definitions.
#include "pitchwire/dsp/units.h"

#include <array>
#include <cctype>
#include <cmath>
#include <charconv>

namespace pitchwire::dsp {
namespace {
constexpr std::array<const char*, 12> kNames = {"C", "C#", "D", "D#", "E", "F", "F#", "G", "G#", "A", "A#", "B"};
}

double semitones(double f_hz, double ref_hz) { return 12.0 * std::log2(f_hz / ref_hz); }
double cents(double f_hz, double ref_hz) { return 1200.0 * std::log2(f_hz / ref_hz); }
double hz_from_semitones(double st, double ref_hz) { return ref_hz * std::exp2(st / 12.0); }
double midi_from_hz(double f_hz) { return 69.0 + semitones(f_hz, kA4Hz); }
double hz_from_midi(double midi) { return hz_from_semitones(midi - 69.0, kA4Hz); }

std::string note_name(int midi) {
  const int pc = ((midi % 12) + 12) % 12;
  const int octave = (midi - pc) / 12 - 1;
  return std::string(kNames[static_cast<std::size_t>(pc)]) + std::to_string(octave);
}

NoteReading nearest_note(double f_hz) {
  const double m = midi_from_hz(f_hz);
  const int nearest = static_cast<int>(std::lround(m));
  return {note_name(nearest), nearest, 100.0 * (m - nearest)};
}

std::optional<double> hz_from_note_name(std::string_view name) {
  static constexpr std::array<int, 7> kLetterPc = {9, 11, 0, 2, 4, 5, 7};  // A B C D E F G
  if (name.size() < 2) return std::nullopt;
  const char letter = static_cast<char>(std::toupper(static_cast<unsigned char>(name[0])));
  if (letter < 'A' || letter > 'G') return std::nullopt;
  int pc = kLetterPc[static_cast<std::size_t>(letter - 'A')];
  std::size_t pos = 1;
  if (name[pos] == '#') {
    ++pc;
    ++pos;
  } else if (name[pos] == 'b') {
    --pc;
    ++pos;
  }
  int octave = 0;
  const char* first = name.data() + pos;
  const char* last = name.data() + name.size();
  if (first == last) return std::nullopt;
  auto [ptr, ec] = std::from_chars(first, last, octave);
  if (ec != std::errc() || ptr != last || octave < -1 || octave > 9) return std::nullopt;
  return hz_from_midi(12.0 * (octave + 1) + pc);
}

}  // namespace pitchwire::dsp
