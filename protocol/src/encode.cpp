// encode.cpp: server messages to text (see encode.h). Frames by std::to_chars, the rest by nlohmann::json.
//
// Thread contract: any thread; no shared state.
#include "pitchwire/protocol/encode.h"
#include "pitchwire/protocol/number_text.h"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <optional>

namespace pitchwire::protocol {
namespace {

template <typename Integer>
void append_integer(std::string& out, Integer value) {
  std::array<char, 24> buf{};
  const auto [end, ec] = std::to_chars(buf.data(), buf.data() + buf.size(), value);
  out.append(buf.data(), ec == std::errc() ? end : buf.data());
}

void append_index_and_time(std::string& out, std::int64_t index, double time_s) {
  out += ",\"index\":";
  append_integer(out, index);
  out += ",\"time_s\":";
  append_fixed(out, time_s, 6);
}

// The members of an object after `{"type":…,"seq":…`: ",<members>}" or "}".
Encoded from_json(ServerType type, const Json& members) {
  if (members.empty()) return Encoded{type, "}"};
  std::string body = members.dump(-1, ' ', false, Json::error_handler_t::replace);
  body.front() = ',';
  return Encoded{type, std::move(body)};
}

Json or_null(const std::optional<double>& v) { return v && std::isfinite(*v) ? Json(*v) : Json(nullptr); }

Json band_list(const std::vector<Band>& bands) {
  Json list = Json::array();
  for (const auto& b : bands) list.push_back(Json{{"name", b.name}, {"low_hz", b.low_hz}, {"high_hz", b.high_hz}});
  return list;
}

Json band_shares(const std::vector<BandShare>& shares) {
  Json list = Json::array();
  for (const auto& b : shares)
    list.push_back(Json{{"name", b.name}, {"inside_fraction", or_null(b.inside_fraction)}, {"state", name(b.state)}});
  return list;
}

Json field_list(FieldSet fields) {
  Json list = Json::array();
  for (std::size_t i = 0; i < kFrameFieldNames.size(); ++i) {
    if (fields.has(static_cast<FrameField>(i))) list.push_back(kFrameFieldNames[i]);
  }
  return list;
}

}  // namespace

MessageHead::MessageHead(ServerType type, std::uint64_t seq) {
  std::string_view parts[] = {"{\"type\":\"", name(type), "\",\"seq\":"};
  char* p = buf_.data();
  for (const auto part : parts) p = std::copy(part.begin(), part.end(), p);
  p = std::to_chars(p, buf_.data() + buf_.size(), seq).ptr;  // at most 9 + 7 + 8 + 20 = 44 characters
  size_ = static_cast<std::size_t>(p - buf_.data());
}

std::string text(const Encoded& message, std::uint64_t seq) {
  const MessageHead head(message.type, seq);
  std::string out;
  out.reserve(head.view().size() + message.body.size());
  out += head.view();
  out += message.body;
  return out;
}

void append_frame_body(std::string& out, const dsp::LiveFrame& frame, FieldSet fields) {
  append_index_and_time(out, frame.index, frame.time_s);
  if (fields.has(FrameField::kF0Hz)) {
    out += ",\"f0_hz\":";
    append_fixed(out, widen(frame.f0_hz), 3);
  }
  if (fields.has(FrameField::kVoicing)) {
    out += ",\"voicing\":";
    append_fixed(out, frame.voicing, 3);
  }
  if (fields.has(FrameField::kConfidence)) {
    out += ",\"confidence\":";
    append_fixed(out, frame.confidence, 3);
  }
  if (fields.has(FrameField::kLevelDbfs)) {
    out += ",\"level_dbfs\":";
    append_fixed(out, frame.level_dbfs, 2);
  }
  out += '}';
}

void append_settled_body(std::string& out, const dsp::SettledFrame& frame) {
  append_index_and_time(out, frame.index, frame.time_s);
  out += ",\"f0_hz\":";
  append_fixed(out, widen(frame.f0_hz), 3);
  out += '}';
}

Encoded encode_frame(const dsp::LiveFrame& frame, FieldSet fields) {
  Encoded e{ServerType::kFrame, {}};
  e.body.reserve(128);
  append_frame_body(e.body, frame, fields);
  return e;
}

Encoded encode_settled(const dsp::SettledFrame& frame) {
  Encoded e{ServerType::kSettled, {}};
  e.body.reserve(64);
  append_settled_body(e.body, frame);
  return e;
}

Json preset_list(const std::vector<Hello::Preset>& presets) {
  Json list = Json::array();
  for (const Hello::Preset& p : presets) list.push_back(Json{{"name", p.name}, {"label", p.label}});
  return list;
}

Encoded encode(const Hello& m) {
  Json exercise = nullptr;
  if (m.exercise) {
    exercise = Json{{"preset", m.exercise->preset}, {"label", m.exercise->label}, {"started_s", m.exercise->started_s}};
  }
  return from_json(
      ServerType::kHello,
      Json{{"protocol", kProtocolVersion},
           {"server_version", m.server_version},
           {"audio", {{"sample_rate_hz", m.audio.sample_rate_hz},
                      {"channel", m.audio.channel > 0 ? Json(m.audio.channel) : Json("mixdown")}}},
           {"hop_ms", m.hop_ms},
           {"settle_ms", m.settle_ms},
           {"reference_hz", m.reference_hz},
           {"f0_range_hz", {{"min", m.f0_min_hz}, {"max", m.f0_max_hz}}},
           {"role", name(m.role)},
           {"bands", band_list(m.bands)},
           {"exercise", std::move(exercise)},
           {"presets", preset_list(m.presets)},
           {"spl_offset_db", or_null(m.spl_offset_db)},
           {"fields", field_list(FieldSet::all())},
           {"limits", {{"max_message_bytes", m.max_message_bytes},
                       {"max_label_chars", kMaxLabelChars},
                       {"max_mark_data_bytes", kMaxMarkDataBytes}}}});
}

Encoded encode(const Stats& m) {
  return from_json(ServerType::kStats, Json{{"time_s", m.time_s},
                                            {"window_s", m.window_s},
                                            {"voiced_fraction", m.voiced_fraction},
                                            {"f0_p5_hz", or_null(m.f0_p5_hz)},
                                            {"f0_p50_hz", or_null(m.f0_p50_hz)},
                                            {"f0_p95_hz", or_null(m.f0_p95_hz)},
                                            {"f0_sd_st", or_null(m.f0_sd_st)},
                                            {"f0_min_hz", or_null(m.f0_min_hz)},
                                            {"f0_max_hz", or_null(m.f0_max_hz)},
                                            {"f0_range_st", or_null(m.f0_range_st)},
                                            {"reference_hz", or_null(m.reference_hz)},
                                            {"f0_min_st", or_null(m.f0_min_st)},
                                            {"f0_p5_st", or_null(m.f0_p5_st)},
                                            {"f0_p50_st", or_null(m.f0_p50_st)},
                                            {"f0_p95_st", or_null(m.f0_p95_st)},
                                            {"f0_max_st", or_null(m.f0_max_st)},
                                            {"level_mean_dbfs", or_null(m.level_mean_dbfs)},
                                            {"level_max_dbfs", or_null(m.level_max_dbfs)},
                                            {"level_mean_db_spl", or_null(m.level_mean_db_spl)},
                                            {"level_max_db_spl", or_null(m.level_max_db_spl)},
                                            {"session_voiced_s", m.session_voiced_s},
                                            {"session_cycle_dose", m.session_cycle_dose},
                                            {"bands", band_shares(m.bands)}});
}

Encoded encode(const Event& m) {
  Json members{{"kind", name(m.kind)}, {"time_s", m.time_s}, {"payload", m.payload.is_object() ? m.payload : Json::object()}};
  if (m.by) members["by"] = name(*m.by);
  return from_json(ServerType::kEvent, std::move(members));
}

Encoded encode(const Error& m) {
  Json members{{"code", name(m.code)}, {"message", m.message}};
  if (!m.id.empty()) members["id"] = m.id;
  return from_json(ServerType::kError, members);
}

Encoded encode(const Pong& m) {
  return from_json(ServerType::kPong, Json{{"id", m.id}, {"time_s", m.time_s}});
}

Encoded encode(const Ack& m) {
  Json members{{"id", m.id}, {"request", name(m.request)}};
  if (m.result.is_object() && !m.result.empty()) members["result"] = m.result;
  return from_json(ServerType::kAck, members);
}

std::string encode_request(const Request& request) {
  Json j{{"type", name(type_of(request))}, {"id", id_of(request)}};
  if (const auto* s = std::get_if<Subscribe>(&request)) {
    switch (s->rate.kind) {
      case Rate::Kind::kHop: j["rate"] = "hop"; break;
      case Rate::Kind::kEvery: j["rate"] = Json{{"every", s->rate.every}}; break;
      case Rate::Kind::kFps: j["rate"] = Json{{"fps", s->rate.fps}}; break;
    }
    j["fields"] = field_list(s->fields);
    j["settled"] = s->settled;
  } else if (const auto* b = std::get_if<SetBand>(&request)) {
    j["name"] = b->band.name;
    j["low"] = b->band.low_hz;
    j["high"] = b->band.high_hz;
  } else if (const auto* c = std::get_if<ClearBand>(&request)) {
    j["name"] = c->name;
  } else if (const auto* x = std::get_if<StartExercise>(&request)) {
    j["preset"] = x->preset;
    if (!x->label.empty()) j["label"] = x->label;
  } else if (const auto* m = std::get_if<Mark>(&request)) {
    j["label"] = m->label;
    if (m->data.is_object()) j["data"] = m->data;
  } else if (const auto* ref = std::get_if<SetReference>(&request)) {
    j["reference"] = ref->reference_hz;
  }
  return j.dump(-1, ' ', false, Json::error_handler_t::replace);
}

void append_fixed(std::string& out, std::optional<double> value, int decimals, std::string_view missing) {
  std::array<char, 48> buf{};
  if (value && std::isfinite(*value)) {
    const auto [end, ec] =
        std::to_chars(buf.data(), buf.data() + buf.size(), *value, std::chars_format::fixed, decimals);
    if (ec == std::errc()) {
      out.append(buf.data(), end);
      return;
    }
  }
  out += missing;
}

}  // namespace pitchwire::protocol
