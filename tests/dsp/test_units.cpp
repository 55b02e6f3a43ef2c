// Unit conversions against their definitions (common practice) and equal temperament with A4 = 440 Hz
// (ISO 16:1975). Hz values of notes are standard equal-tempered frequencies (common practice).
#include "pitchwire/dsp/units.h"

#include <gtest/gtest.h>

#include <cmath>

namespace pitchwire::dsp {
namespace {

TEST(Units, SemitonesAndCentsFollowTheirDefinitions) {
  EXPECT_DOUBLE_EQ(semitones(440.0, 220.0), 12.0);   // an octave is 12 semitones
  EXPECT_DOUBLE_EQ(cents(440.0, 220.0), 1200.0);     // and 1200 cents
  EXPECT_NEAR(semitones(220.0 * 1.5, 220.0), 7.0196, 1e-4);  // a just fifth is 701.96 cents
  EXPECT_NEAR(hz_from_semitones(-12.0, 200.0), 100.0, 1e-12);
}

TEST(Units, MidiNumbersUseA4At440Hz) {
  EXPECT_DOUBLE_EQ(midi_from_hz(440.0), 69.0);
  EXPECT_NEAR(hz_from_midi(60), 261.6256, 1e-4);  // C4
  EXPECT_NEAR(hz_from_midi(45), 110.0, 1e-9);     // A2
  EXPECT_NEAR(hz_from_midi(84), 1046.5023, 1e-4); // C6
}

TEST(Units, NearestNoteAndOffset) {
  const auto r = nearest_note(446.0);
  EXPECT_EQ(r.name, "A4");
  EXPECT_EQ(r.midi, 69);
  EXPECT_NEAR(r.cents_off, 1200.0 * std::log2(446.0 / 440.0), 1e-9);  // +23.45 cents
  EXPECT_EQ(nearest_note(261.63).name, "C4");
  EXPECT_EQ(nearest_note(27.5).name, "A0");
  EXPECT_EQ(note_name(61), "C#4");
  EXPECT_EQ(note_name(0), "C-1");
}

TEST(Units, NoteNamesParse) {
  EXPECT_NEAR(*hz_from_note_name("A3"), 220.0, 1e-9);
  EXPECT_NEAR(*hz_from_note_name("E4"), 329.6276, 1e-4);
  EXPECT_NEAR(*hz_from_note_name("c#3"), *hz_from_note_name("Db3"), 1e-9);
  for (const char* bad : {"", "H4", "A", "A10", "A#", "4A", "A4x", "Ab-2"}) EXPECT_FALSE(hz_from_note_name(bad)) << bad;
}

}  // namespace
}  // namespace pitchwire::dsp
