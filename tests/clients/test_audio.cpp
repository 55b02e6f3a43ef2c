// test_audio.cpp: see test_audio.h.
#include "test_audio.h"

#include <sndfile.h>
#include <stdlib.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <fstream>
#include <numbers>
#include <stdexcept>

namespace pitchwire::testing {

TempDir::TempDir() {
  std::string pattern = (std::filesystem::temp_directory_path() / "pitchwire-test-XXXXXX").string();
  if (::mkdtemp(pattern.data()) == nullptr) throw std::runtime_error("mkdtemp failed");
  path_ = pattern;
}

TempDir::~TempDir() {
  std::error_code ec;
  std::filesystem::remove_all(path_, ec);
}

void write_sound(const std::filesystem::path& path, int format, int sample_rate, int channels,
                 const std::vector<float>& interleaved) {
  SF_INFO info{};
  info.samplerate = sample_rate;
  info.channels = channels;
  info.format = format;
  SNDFILE* sf = sf_open(path.c_str(), SFM_WRITE, &info);
  if (sf == nullptr) throw std::runtime_error(std::string("sf_open for writing: ") + sf_strerror(nullptr));
  const auto frames = static_cast<sf_count_t>(interleaved.size() / static_cast<std::size_t>(channels));
  sf_count_t written = 0;
  if ((format & SF_FORMAT_SUBMASK) == SF_FORMAT_PCM_16) {
    // libsndfile scales float by 32767 when writing 16 bits but by 1/32768 when reading them back;
    // writing the integers k = 32768 x keeps the round trip exact for values quantized to k/32768.
    std::vector<short> ints(interleaved.size());
    for (std::size_t i = 0; i < ints.size(); ++i) {
      ints[i] = static_cast<short>(std::clamp(std::lround(interleaved[i] * 32768.0), -32768L, 32767L));
    }
    written = frames > 0 ? sf_writef_short(sf, ints.data(), frames) : 0;
  } else {
    written = frames > 0 ? sf_writef_float(sf, interleaved.data(), frames) : 0;
  }
  sf_close(sf);
  if (written != frames) throw std::runtime_error("sf_writef_float wrote fewer frames than asked");
}

namespace {
void put_u32(std::ofstream& out, std::uint32_t v) {
  const char b[4] = {static_cast<char>(v & 0xFF), static_cast<char>((v >> 8) & 0xFF),
                     static_cast<char>((v >> 16) & 0xFF), static_cast<char>((v >> 24) & 0xFF)};
  out.write(b, 4);
}
void put_u16(std::ofstream& out, std::uint16_t v) {
  const char b[2] = {static_cast<char>(v & 0xFF), static_cast<char>((v >> 8) & 0xFF)};
  out.write(b, 2);
}
}  // namespace

void write_float_wav(const std::filesystem::path& path, int sample_rate, int channels,
                     const std::vector<float>& interleaved) {
  // RIFF/WAVE with a 16-byte fmt chunk, format tag 3 (IEEE float), 32 bits per sample.
  const auto data_bytes = static_cast<std::uint32_t>(interleaved.size() * 4);
  const auto ch = static_cast<std::uint16_t>(channels);
  std::ofstream out(path, std::ios::binary);
  out.write("RIFF", 4);
  put_u32(out, 4 + (8 + 16) + (8 + data_bytes));
  out.write("WAVE", 4);
  out.write("fmt ", 4);
  put_u32(out, 16);
  put_u16(out, 3);
  put_u16(out, ch);
  put_u32(out, static_cast<std::uint32_t>(sample_rate));
  put_u32(out, static_cast<std::uint32_t>(sample_rate) * 4u * ch);
  put_u16(out, static_cast<std::uint16_t>(4 * ch));
  put_u16(out, 32);
  out.write("data", 4);
  put_u32(out, data_bytes);
  for (const float v : interleaved) {
    std::uint32_t bits = 0;
    std::memcpy(&bits, &v, 4);
    put_u32(out, bits);
  }
  if (!out) throw std::runtime_error("writing " + path.string() + " failed");
}

void write_text(const std::filesystem::path& path, const std::string& text) {
  std::ofstream out(path, std::ios::binary);
  out << text;
  if (!out) throw std::runtime_error("writing " + path.string() + " failed");
}

std::vector<float> sine16(std::size_t n, double f_hz, double sample_rate, double a) {
  std::vector<float> out(n);
  for (std::size_t i = 0; i < n; ++i) {
    const double v = a * std::sin(2.0 * std::numbers::pi * f_hz * static_cast<double>(i) / sample_rate);
    out[i] = static_cast<float>(std::round(v * 32768.0) / 32768.0);
  }
  return out;
}

std::vector<float> interleave(const std::vector<std::vector<float>>& channels) {
  const std::size_t n = channels.front().size();
  std::vector<float> out;
  out.reserve(n * channels.size());
  for (std::size_t i = 0; i < n; ++i) {
    for (const auto& c : channels) out.push_back(c[i]);
  }
  return out;
}

}  // namespace pitchwire::testing
