// encode.h: server messages to JSON text, encoded once and sent to any number of connections.
//
// Every server message reads `{"type":"<type>","seq":<seq>` followed by a body that starts with ',' or
// '}'. The body does not depend on the connection, the seq does (each connection counts from 1), so a
// message is encoded once as an Encoded body and each connection puts its own MessageHead in front:
// either by gather-writing head and body as two buffers (no copy) or with text() (one copy).
// Frames and settled frames are written with std::to_chars (fixed decimals, null when unvoiced); the
// other messages, which are rare, go through nlohmann::json.
//
// Thread contract: any thread; no shared state. An Encoded is immutable once made and may be shared.
#pragma once

#include <array>
#include <cstdint>
#include <string>
#include <string_view>

#include "pitchwire/dsp/pitch_tracker.h"
#include "pitchwire/protocol/messages.h"

namespace pitchwire::protocol {

struct Encoded {
  ServerType type = ServerType::kFrame;
  std::string body;  // the text after the seq
};

// `{"type":"<type>","seq":<seq>` in a fixed buffer: no allocation.
class MessageHead {
 public:
  MessageHead(ServerType type, std::uint64_t seq);
  [[nodiscard]] std::string_view view() const { return {buf_.data(), size_}; }

 private:
  std::array<char, 48> buf_{};
  std::size_t size_ = 0;
};

// The whole message text for one connection.
[[nodiscard]] std::string text(const Encoded& message, std::uint64_t seq);

// Per-frame path (analysis thread): std::to_chars only. time_s with 6 decimals, f0_hz, voicing and
// confidence with 3, level_dbfs with 2; f0_hz is null when unvoiced (and any non-finite number is null).
// A frame carries index, time_s and the fields asked for; a settled frame carries index, time_s and the
// settled f0_hz.
void append_frame_body(std::string& out, const dsp::LiveFrame& frame, FieldSet fields);
void append_settled_body(std::string& out, const dsp::SettledFrame& frame);
[[nodiscard]] Encoded encode_frame(const dsp::LiveFrame& frame, FieldSet fields);
[[nodiscard]] Encoded encode_settled(const dsp::SettledFrame& frame);

[[nodiscard]] Encoded encode(const Hello& message);
[[nodiscard]] Encoded encode(const Stats& message);
[[nodiscard]] Encoded encode(const Event& message);
[[nodiscard]] Encoded encode(const Error& message);
[[nodiscard]] Encoded encode(const Pong& message);
[[nodiscard]] Encoded encode(const Ack& message);

// Client side (clients and tests): the text of a request, which decode_request() reads back.
[[nodiscard]] std::string encode_request(const Request& request);

}  // namespace pitchwire::protocol
