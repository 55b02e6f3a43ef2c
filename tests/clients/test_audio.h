// test_audio.h: sound and non-sound files written by the tests themselves, in a temporary folder.
#pragma once

#include <filesystem>
#include <string>
#include <vector>

namespace pitchwire::testing {

// A fresh folder under the system's temporary folder, removed with everything in it at destruction.
class TempDir {
 public:
  TempDir();
  ~TempDir();
  TempDir(const TempDir&) = delete;
  TempDir& operator=(const TempDir&) = delete;
  [[nodiscard]] const std::filesystem::path& path() const { return path_; }
  [[nodiscard]] std::filesystem::path operator/(const std::string& name) const { return path_ / name; }

 private:
  std::filesystem::path path_;
};

// Writes interleaved samples with libsndfile. format is a libsndfile SF_FORMAT_* combination. For
// 16-bit PCM the samples are stored as round(32768 x), which libsndfile reads back as exactly x when
// x is a multiple of 1/32768 (as sine16() makes them).
void write_sound(const std::filesystem::path& path, int format, int sample_rate, int channels,
                 const std::vector<float>& interleaved);

// A float WAV written byte by byte (libsndfile is not asked to store NaN or infinity).
void write_float_wav(const std::filesystem::path& path, int sample_rate, int channels,
                     const std::vector<float>& interleaved);

void write_text(const std::filesystem::path& path, const std::string& text);

// n samples of a sine at f_hz, amplitude a, quantized to 16 bits so that 16-bit files hold them exactly.
std::vector<float> sine16(std::size_t n, double f_hz, double sample_rate, double a = 0.5);

// Interleaves equally long channels.
std::vector<float> interleave(const std::vector<std::vector<float>>& channels);

}  // namespace pitchwire::testing
