// Tests of the file front end (clients/cli/audiofile): reading, channel selection, mixdown and every
// kind of bad input. All files are written by the tests into a temporary folder.
#include <gtest/gtest.h>
#include <sndfile.h>

#include <cmath>
#include <filesystem>
#include <limits>
#include <string>
#include <vector>

#include "pitchwire/audiofile/audio_file.h"
#include "test_audio.h"

namespace pitchwire::audiofile {
namespace {

using pitchwire::testing::interleave;
using pitchwire::testing::sine16;
using pitchwire::testing::TempDir;
using pitchwire::testing::write_float_wav;
using pitchwire::testing::write_sound;
using pitchwire::testing::write_text;

constexpr int kWav16 = SF_FORMAT_WAV | SF_FORMAT_PCM_16;
constexpr int kFlac16 = SF_FORMAT_FLAC | SF_FORMAT_PCM_16;

// Runs f, which must throw AudioFileError; returns it.
template <typename F>
AudioFileError expect_error(F&& f) {
  try {
    f();
  } catch (const AudioFileError& e) {
    return e;
  }
  ADD_FAILURE() << "no AudioFileError thrown";
  return AudioFileError(Problem::kMissing, "");
}

// Messages are one line and leave the path to the caller.
void expect_one_line_without_path(const AudioFileError& e, const std::filesystem::path& path) {
  const std::string message = e.what();
  EXPECT_FALSE(message.empty());
  EXPECT_EQ(message.find('\n'), std::string::npos) << message;
  EXPECT_EQ(message.find(path.string()), std::string::npos) << message;
}

TEST(AudioFile, ReadsWav16Exactly) {
  TempDir dir;
  const auto path = dir / "mono.wav";
  // 16-bit quantized values: a 16-bit file holds them exactly, libsndfile reads them back as k/32768.
  const std::vector<float> samples = sine16(1601, 220.0, 16000.0);
  write_sound(path, kWav16, 16000, 1, samples);

  AudioFileReader reader(path);
  EXPECT_EQ(reader.info().sample_rate_hz, 16000.0);
  EXPECT_EQ(reader.info().channels, 1);
  EXPECT_EQ(reader.info().frames, 1601);
  EXPECT_DOUBLE_EQ(reader.info().duration_s(), 1601.0 / 16000.0);
  EXPECT_NE(reader.info().format.find("WAV"), std::string::npos) << reader.info().format;
  EXPECT_EQ(read_all(path), samples);
}

TEST(AudioFile, ReadsFlacExactly) {
  TempDir dir;
  const auto path = dir / "voice.flac";
  // FLAC is lossless: 16-bit values come back unchanged.
  const std::vector<float> samples = sine16(44100 / 2 + 13, 196.0, 44100.0);
  write_sound(path, kFlac16, 44100, 1, samples);

  AudioFileReader reader(path);
  EXPECT_EQ(reader.info().sample_rate_hz, 44100.0);
  EXPECT_EQ(reader.info().frames, static_cast<std::int64_t>(samples.size()));
  EXPECT_NE(reader.info().format.find("FLAC"), std::string::npos) << reader.info().format;
  EXPECT_EQ(read_all(path), samples);
}

TEST(AudioFile, SelectsOneChannel) {
  TempDir dir;
  const auto path = dir / "stereo.flac";
  const std::vector<float> left = sine16(3000, 110.0, 16000.0, 0.25);
  const std::vector<float> right = sine16(3000, 330.0, 16000.0, 0.5);
  write_sound(path, kFlac16, 16000, 2, interleave({left, right}));

  EXPECT_EQ(read_all(path, {.channel = 1}), left);
  EXPECT_EQ(read_all(path, {.channel = 2}), right);
}

TEST(AudioFile, MixdownIsTheMeanOfAllChannels) {
  TempDir dir;
  const auto path = dir / "three.wav";
  const std::vector<float> a = {0.25f, -1.0f, 0.5f, 0.0f};
  const std::vector<float> b = {0.5f, -1.0f, -0.5f, 0.125f};
  const std::vector<float> c = {-0.125f, -1.0f, 0.0f, 0.375f};
  write_sound(path, SF_FORMAT_WAV | SF_FORMAT_FLOAT, 8000, 3, interleave({a, b, c}));

  const std::vector<float> mixed = read_all(path);
  ASSERT_EQ(mixed.size(), 4u);
  for (std::size_t i = 0; i < mixed.size(); ++i) {
    // The arithmetic mean of the three channels, computed here by hand.
    const double mean = (static_cast<double>(a[i]) + b[i] + c[i]) / 3.0;
    EXPECT_FLOAT_EQ(mixed[i], static_cast<float>(mean)) << "frame " << i;
  }
}

TEST(AudioFile, DeliversBlocksOfAtMostBlockFrames) {
  TempDir dir;
  const auto path = dir / "blocks.wav";
  const std::vector<float> samples = sine16(1037, 150.0, 8000.0);
  write_sound(path, kWav16, 8000, 1, samples);

  AudioFileReader reader(path, {.channel = std::nullopt, .block_frames = 100});
  std::vector<float> joined;
  for (auto block = reader.read_block(); !block.empty(); block = reader.read_block()) {
    EXPECT_LE(block.size(), 100u);
    joined.insert(joined.end(), block.begin(), block.end());
  }
  EXPECT_EQ(joined, samples);
  EXPECT_EQ(reader.frames_read(), 1037);
  EXPECT_TRUE(reader.read_block().empty());  // the end stays the end
}

TEST(AudioFile, MissingPath) {
  TempDir dir;
  const auto path = dir / "nothing-here.wav";
  const AudioFileError e = expect_error([&] { AudioFileReader reader(path); });
  EXPECT_EQ(e.problem(), Problem::kMissing);
  EXPECT_STREQ(e.what(), "no such file");
}

TEST(AudioFile, Directory) {
  TempDir dir;
  const AudioFileError e = expect_error([&] { AudioFileReader reader(dir.path()); });
  EXPECT_EQ(e.problem(), Problem::kDirectory);
  EXPECT_NE(std::string(e.what()).find("directory"), std::string::npos) << e.what();
}

TEST(AudioFile, TextFileNamedWav) {
  TempDir dir;
  const auto path = dir / "x.wav";
  write_text(path, "time,f0\n0.0,220.0\nthis is not a sound file\n");
  const AudioFileError e = expect_error([&] { AudioFileReader reader(path); });
  EXPECT_EQ(e.problem(), Problem::kNotAudio);
  EXPECT_NE(std::string(e.what()).find("not an audio file"), std::string::npos) << e.what();
  expect_one_line_without_path(e, path);
}

TEST(AudioFile, EmptyWav) {
  TempDir dir;
  const auto path = dir / "empty.wav";
  write_sound(path, kWav16, 16000, 1, {});
  const AudioFileError e = expect_error([&] { AudioFileReader reader(path); });
  EXPECT_EQ(e.problem(), Problem::kEmpty);
  EXPECT_NE(std::string(e.what()).find("no audio samples"), std::string::npos) << e.what();
}

TEST(AudioFile, WavTruncatedInTheData) {
  TempDir dir;
  const auto path = dir / "cut.wav";
  write_sound(path, kWav16, 16000, 1, sine16(1000, 220.0, 16000.0));
  // libsndfile writes a 44-byte header before the 2000 data bytes; keep 44 + 1001 bytes: the header
  // declares 1000 frames, 500 whole frames remain (and half of the next one).
  ASSERT_EQ(std::filesystem::file_size(path), 44u + 2000u);
  std::filesystem::resize_file(path, 44 + 1001);

  const AudioFileError e = expect_error([&] { AudioFileReader reader(path); });
  EXPECT_EQ(e.problem(), Problem::kTruncated);
  const std::string message = e.what();
  EXPECT_NE(message.find("truncated"), std::string::npos) << message;
  EXPECT_NE(message.find("1000 frames"), std::string::npos) << message;
  EXPECT_NE(message.find("500"), std::string::npos) << message;
  expect_one_line_without_path(e, path);
}

TEST(AudioFile, FlacTruncatedIsFoundWhileReading) {
  TempDir dir;
  const auto path = dir / "cut.flac";
  // A tone with a slow sweep so that the FLAC frames do not compress to almost nothing.
  std::vector<float> samples(48000);
  for (std::size_t i = 0; i < samples.size(); ++i) {
    const double t = static_cast<double>(i) / 16000.0;
    samples[i] = static_cast<float>(0.4 * std::sin(2.0 * 3.14159265358979 * (200.0 + 100.0 * t) * t));
  }
  write_sound(path, kFlac16, 16000, 1, samples);
  std::filesystem::resize_file(path, std::filesystem::file_size(path) / 2);

  // The STREAMINFO block still declares all 48000 frames, so opening succeeds.
  AudioFileReader reader(path);
  EXPECT_EQ(reader.info().frames, 48000);
  const AudioFileError e = expect_error([&] {
    for (auto block = reader.read_block(); !block.empty(); block = reader.read_block()) {
    }
  });
  EXPECT_EQ(e.problem(), Problem::kTruncated);
  EXPECT_LT(reader.frames_read(), 48000);
  EXPECT_NE(std::string(e.what()).find("48000 frames"), std::string::npos) << e.what();
  expect_one_line_without_path(e, path);
}

TEST(AudioFile, NanStopsAtTheFirstBadSampleAndNamesItsTime) {
  TempDir dir;
  const auto path = dir / "nan.wav";
  std::vector<float> samples = sine16(8000, 200.0, 16000.0);
  samples[4000] = std::numeric_limits<float>::quiet_NaN();  // 4000 / 16000 Hz = 0.25 s
  samples[6000] = std::numeric_limits<float>::quiet_NaN();
  write_float_wav(path, 16000, 1, samples);

  AudioFileReader reader(path, {.channel = std::nullopt, .block_frames = 1024});
  std::vector<float> good;
  const AudioFileError e = expect_error([&] {
    for (auto block = reader.read_block(); !block.empty(); block = reader.read_block()) {
      good.insert(good.end(), block.begin(), block.end());
    }
  });
  EXPECT_EQ(e.problem(), Problem::kNonFinite);
  EXPECT_NE(std::string(e.what()).find("NaN at 0.250000 s"), std::string::npos) << e.what();
  // Everything before the bad sample was delivered, nothing after it.
  EXPECT_EQ(good, std::vector<float>(samples.begin(), samples.begin() + 4000));
  // The reader stays stopped.
  EXPECT_THROW((void)reader.read_block(), AudioFileError);
  expect_one_line_without_path(e, path);
}

TEST(AudioFile, InfinityInTheMixdownIsNamedWithItsChannel) {
  TempDir dir;
  const auto path = dir / "inf.wav";
  std::vector<float> left(1600, 0.1f);
  std::vector<float> right(1600, 0.2f);
  right[800] = -std::numeric_limits<float>::infinity();  // 800 / 8000 Hz = 0.1 s
  write_float_wav(path, 8000, 2, interleave({left, right}));

  const AudioFileError e = expect_error([&] { (void)read_all(path); });
  EXPECT_EQ(e.problem(), Problem::kNonFinite);
  EXPECT_NE(std::string(e.what()).find("-inf at 0.100000 s"), std::string::npos) << e.what();
  EXPECT_NE(std::string(e.what()).find("channel 2"), std::string::npos) << e.what();
  // The left channel alone is clean.
  EXPECT_EQ(read_all(path, {.channel = 1}), left);
}

TEST(AudioFile, ChannelOutOfRange) {
  TempDir dir;
  const auto path = dir / "stereo.wav";
  write_sound(path, kWav16, 16000, 2, interleave({sine16(100, 100.0, 16000.0), sine16(100, 200.0, 16000.0)}));
  for (const int channel : {0, -1, 3}) {
    const AudioFileError e = expect_error([&] { AudioFileReader reader(path, {.channel = channel}); });
    EXPECT_EQ(e.problem(), Problem::kChannelOutOfRange) << channel;
    EXPECT_NE(std::string(e.what()).find("2 channels"), std::string::npos) << e.what();
  }
}

}  // namespace
}  // namespace pitchwire::audiofile
