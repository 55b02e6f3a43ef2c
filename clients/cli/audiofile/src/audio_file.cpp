// audio_file.cpp: see audio_file.h.
#include "pitchwire/audiofile/audio_file.h"

#include <sndfile.h>

#include <algorithm>
#include <array>
#include <cctype>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <system_error>
#include <utility>

namespace pitchwire::audiofile {
namespace {

std::string format_seconds(double s, int decimals) {
  std::array<char, 64> buf{};
  std::snprintf(buf.data(), buf.size(), "%.*f s", decimals, s);
  return buf.data();
}

// libsndfile messages read "Error : flac decoder lost sync." or "System error : Permission denied.";
// keep the substance, lower-case its first letter, drop the final full stop.
std::string readable_sndfile_message(std::string message) {
  for (const std::string_view prefix : {"System error : ", "Error : ", "Error: "}) {
    if (message.starts_with(prefix)) {
      message.erase(0, prefix.size());
      break;
    }
  }
  while (!message.empty() && (message.back() == '.' || message.back() == '\n' || message.back() == ' ')) {
    message.pop_back();
  }
  if (message.size() > 1 && std::isupper(static_cast<unsigned char>(message[0])) &&
      std::islower(static_cast<unsigned char>(message[1]))) {
    message[0] = static_cast<char>(std::tolower(static_cast<unsigned char>(message[0])));
  }
  return message;
}

std::string format_description(SNDFILE* sf, const SF_INFO& info) {
  SF_FORMAT_INFO major{};
  major.format = info.format & SF_FORMAT_TYPEMASK;
  SF_FORMAT_INFO sub{};
  sub.format = info.format & SF_FORMAT_SUBMASK;
  std::string out;
  if (sf_command(sf, SFC_GET_FORMAT_INFO, &major, sizeof major) == 0 && major.name != nullptr) out = major.name;
  if (sf_command(sf, SFC_GET_FORMAT_INFO, &sub, sizeof sub) == 0 && sub.name != nullptr) {
    if (!out.empty()) out += ", ";
    out += sub.name;
  }
  return out;
}

// Bytes one frame takes in the data chunk for the plain sample encodings; 0 when not fixed.
int bytes_per_frame(const SF_INFO& info) {
  int bytes = 0;
  switch (info.format & SF_FORMAT_SUBMASK) {
    case SF_FORMAT_PCM_S8:
    case SF_FORMAT_PCM_U8:
    case SF_FORMAT_ULAW:
    case SF_FORMAT_ALAW:
      bytes = 1;
      break;
    case SF_FORMAT_PCM_16:
      bytes = 2;
      break;
    case SF_FORMAT_PCM_24:
      bytes = 3;
      break;
    case SF_FORMAT_PCM_32:
    case SF_FORMAT_FLOAT:
      bytes = 4;
      break;
    case SF_FORMAT_DOUBLE:
      bytes = 8;
      break;
    default:
      return 0;
  }
  return bytes * info.channels;
}

struct DataChunk {
  std::uint64_t declared_bytes = 0;
  std::uint64_t present_bytes = 0;
};

// libsndfile quietly shortens a WAV or AIFF data chunk that runs past the end of the file, so its
// frame count cannot reveal the truncation. Walk the chunks and compare the declared data size with
// the bytes present. Streaming writers that cannot seek back leave 0 or a huge placeholder as the
// size; those are not taken as a declaration.
std::optional<DataChunk> truncated_data_chunk(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return std::nullopt;
  std::error_code ec;
  const auto file_size = static_cast<std::uint64_t>(std::filesystem::file_size(path, ec));
  if (ec) return std::nullopt;

  std::array<unsigned char, 12> head{};
  if (!in.read(reinterpret_cast<char*>(head.data()), head.size())) return std::nullopt;
  const auto tag = [](const unsigned char* p, const char* s) { return std::equal(p, p + 4, s); };
  bool little_endian = false;
  const char* data_id = nullptr;
  std::uint64_t data_header_bytes = 0;  // bytes inside the chunk before the samples
  if (tag(head.data(), "RIFF") && tag(head.data() + 8, "WAVE")) {
    little_endian = true;
    data_id = "data";
  } else if (tag(head.data(), "RIFX") && tag(head.data() + 8, "WAVE")) {
    data_id = "data";
  } else if (tag(head.data(), "FORM") && (tag(head.data() + 8, "AIFF") || tag(head.data() + 8, "AIFC"))) {
    data_id = "SSND";
    data_header_bytes = 8;  // offset and block size fields
  } else {
    return std::nullopt;
  }

  std::uint64_t offset = 12;
  for (int chunks = 0; chunks < 4096 && offset + 8 <= file_size; ++chunks) {
    std::array<unsigned char, 8> ch{};
    in.seekg(static_cast<std::streamoff>(offset));
    if (!in.read(reinterpret_cast<char*>(ch.data()), ch.size())) return std::nullopt;
    const std::uint32_t size =
        little_endian ? (std::uint32_t{ch[4]} | std::uint32_t{ch[5]} << 8 | std::uint32_t{ch[6]} << 16 |
                         std::uint32_t{ch[7]} << 24)
                      : (std::uint32_t{ch[7]} | std::uint32_t{ch[6]} << 8 | std::uint32_t{ch[5]} << 16 |
                         std::uint32_t{ch[4]} << 24);
    if (tag(ch.data(), data_id)) {
      if (size == 0 || size >= 0x7FFFF000u) return std::nullopt;
      const std::uint64_t declared = size > data_header_bytes ? size - data_header_bytes : 0;
      const std::uint64_t start = offset + 8 + data_header_bytes;
      const std::uint64_t present = file_size > start ? file_size - start : 0;
      if (declared > present) return DataChunk{declared, present};
      return std::nullopt;
    }
    offset += 8 + std::uint64_t{size} + (size & 1u);
  }
  return std::nullopt;
}

}  // namespace

AudioFileError::AudioFileError(Problem problem, const std::string& message)
    : std::runtime_error(message), problem_(problem) {}

struct AudioFileReader::Impl {
  SNDFILE* sf = nullptr;
  AudioFileInfo info;
  std::optional<int> channel;
  std::size_t block_frames = 4096;
  bool length_known = true;
  std::int64_t file_frames_read = 0;  // frames taken from the file
  std::int64_t frames_delivered = 0;  // mono frames handed out
  std::vector<float> interleaved;
  std::vector<float> mono;
  std::optional<AudioFileError> pending;
  bool at_end = false;

  ~Impl() {
    if (sf != nullptr) sf_close(sf);
  }

  [[nodiscard]] AudioFileError truncated_error() const {
    std::string message = "truncated: the header declares " + std::to_string(info.frames) + " frames (" +
                          format_seconds(info.duration_s(), 3) + "), only " + std::to_string(file_frames_read) +
                          " are readable (" +
                          format_seconds(static_cast<double>(file_frames_read) / info.sample_rate_hz, 3) + ")";
    if (sf_error(sf) != SF_ERR_NO_ERROR) message += "; libsndfile: " + readable_sndfile_message(sf_strerror(sf));
    return AudioFileError(Problem::kTruncated, message);
  }

  [[nodiscard]] AudioFileError nonfinite_error(std::int64_t frame, float value, int ch) const {
    const char* what = std::isnan(value) ? "NaN" : (value > 0.0f ? "+inf" : "-inf");
    std::string message = std::string("sample value ") + what + " at " +
                          format_seconds(static_cast<double>(frame) / info.sample_rate_hz, 6) + " (frame " +
                          std::to_string(frame);
    if (info.channels > 1) message += ", channel " + std::to_string(ch);
    message += ")";
    return AudioFileError(Problem::kNonFinite, message);
  }
};

AudioFileReader::AudioFileReader(const std::filesystem::path& path, const ReadOptions& options)
    : impl_(std::make_unique<Impl>()) {
  std::error_code ec;
  const auto status = std::filesystem::status(path, ec);
  if (status.type() == std::filesystem::file_type::not_found) throw AudioFileError(Problem::kMissing, "no such file");
  if (status.type() == std::filesystem::file_type::directory) {
    throw AudioFileError(Problem::kDirectory, "is a directory, not an audio file");
  }

  SF_INFO sfinfo{};
  impl_->sf = sf_open(path.c_str(), SFM_READ, &sfinfo);
  if (impl_->sf == nullptr) {
    const int code = sf_error(nullptr);
    const std::string detail = readable_sndfile_message(sf_strerror(nullptr));
    switch (code) {
      case SF_ERR_UNRECOGNISED_FORMAT:
        throw AudioFileError(Problem::kNotAudio, "not an audio file (" + detail + ")");
      case SF_ERR_SYSTEM:
        throw AudioFileError(Problem::kCannotOpen, "cannot open: " + detail);
      case SF_ERR_MALFORMED_FILE:
        throw AudioFileError(Problem::kUnsupported, "malformed audio file (" + detail + ")");
      case SF_ERR_UNSUPPORTED_ENCODING:
        throw AudioFileError(Problem::kUnsupported, "unsupported audio encoding (" + detail + ")");
      default:
        throw AudioFileError(Problem::kUnsupported, "cannot read as audio (" + detail + ")");
    }
  }
  if (sfinfo.samplerate <= 0 || sfinfo.channels <= 0) {
    throw AudioFileError(Problem::kUnsupported, "unsupported audio file (no sample rate or no channels)");
  }

  AudioFileInfo& info = impl_->info;
  info.sample_rate_hz = static_cast<double>(sfinfo.samplerate);
  info.channels = sfinfo.channels;
  info.frames = sfinfo.frames;
  info.format = format_description(impl_->sf, sfinfo);
  impl_->length_known = sfinfo.frames >= 0 && sfinfo.frames != SF_COUNT_MAX;

  if (const auto chunk = truncated_data_chunk(path)) {
    const int bpf = bytes_per_frame(sfinfo);
    if (bpf > 0) {
      const auto declared = static_cast<std::int64_t>(chunk->declared_bytes / static_cast<std::uint64_t>(bpf));
      const auto present = static_cast<std::int64_t>(chunk->present_bytes / static_cast<std::uint64_t>(bpf));
      throw AudioFileError(Problem::kTruncated,
                           "truncated: the header declares " + std::to_string(declared) + " frames (" +
                               format_seconds(static_cast<double>(declared) / info.sample_rate_hz, 3) +
                               "), the file holds " + std::to_string(present) + " (" +
                               format_seconds(static_cast<double>(present) / info.sample_rate_hz, 3) + ")");
    }
    throw AudioFileError(Problem::kTruncated, "truncated: the header declares " +
                                                  std::to_string(chunk->declared_bytes) +
                                                  " bytes of audio data, the file holds " +
                                                  std::to_string(chunk->present_bytes));
  }
  if (impl_->length_known && info.frames == 0) throw AudioFileError(Problem::kEmpty, "no audio samples (empty file)");

  if (options.channel) {
    const int ch = *options.channel;
    if (ch < 1 || ch > info.channels) {
      throw AudioFileError(Problem::kChannelOutOfRange,
                           "channel " + std::to_string(ch) + " out of range: the file has " +
                               std::to_string(info.channels) + (info.channels == 1 ? " channel" : " channels") +
                               ", numbered from 1");
    }
  }
  impl_->channel = options.channel;
  impl_->block_frames = std::max<std::size_t>(options.block_frames, 1);
  impl_->interleaved.resize(impl_->block_frames * static_cast<std::size_t>(info.channels));
  impl_->mono.resize(impl_->block_frames);
}

AudioFileReader::~AudioFileReader() = default;
AudioFileReader::AudioFileReader(AudioFileReader&&) noexcept = default;
AudioFileReader& AudioFileReader::operator=(AudioFileReader&&) noexcept = default;

const AudioFileInfo& AudioFileReader::info() const { return impl_->info; }

std::int64_t AudioFileReader::frames_read() const { return impl_->frames_delivered; }

std::span<const float> AudioFileReader::read_block() {
  Impl& s = *impl_;
  if (s.pending) throw *s.pending;
  if (s.at_end) return {};

  auto want = static_cast<sf_count_t>(s.block_frames);
  if (s.length_known) want = std::min<sf_count_t>(want, s.info.frames - s.file_frames_read);
  sf_count_t got = want > 0 ? sf_readf_float(s.sf, s.interleaved.data(), want) : 0;
  got = std::max<sf_count_t>(got, 0);

  const auto channels = static_cast<std::size_t>(s.info.channels);
  const auto count = static_cast<std::size_t>(got);
  std::size_t good = count;
  for (std::size_t i = 0; i < count && good == count; ++i) {
    const float* frame = s.interleaved.data() + i * channels;
    if (s.channel) {
      const float v = frame[*s.channel - 1];
      if (!std::isfinite(v)) {
        s.pending = s.nonfinite_error(s.file_frames_read + static_cast<std::int64_t>(i), v, *s.channel);
        good = i;
      } else {
        s.mono[i] = v;
      }
    } else {
      double sum = 0.0;
      for (std::size_t c = 0; c < channels; ++c) {
        if (!std::isfinite(frame[c])) {
          s.pending = s.nonfinite_error(s.file_frames_read + static_cast<std::int64_t>(i), frame[c],
                                        static_cast<int>(c) + 1);
          good = i;
          break;
        }
        sum += frame[c];
      }
      if (good == count) s.mono[i] = static_cast<float>(sum / static_cast<double>(channels));
    }
  }
  s.file_frames_read += got;

  if (!s.pending && got < want) {
    if (s.length_known) {
      s.pending = s.truncated_error();
    } else {
      s.at_end = true;
      if (s.file_frames_read == 0) s.pending = AudioFileError(Problem::kEmpty, "no audio samples (empty file)");
    }
  }
  if (!s.pending && s.length_known && s.file_frames_read >= s.info.frames) s.at_end = true;

  s.frames_delivered += static_cast<std::int64_t>(good);
  if (good == 0 && s.pending) throw *s.pending;
  return {s.mono.data(), good};
}

std::vector<float> read_all(const std::filesystem::path& path, const ReadOptions& options) {
  AudioFileReader reader(path, options);
  std::vector<float> out;
  if (reader.info().frames > 0) out.reserve(static_cast<std::size_t>(reader.info().frames));
  for (auto block = reader.read_block(); !block.empty(); block = reader.read_block()) {
    out.insert(out.end(), block.begin(), block.end());
  }
  return out;
}

}  // namespace pitchwire::audiofile
