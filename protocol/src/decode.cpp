// decode.cpp: client text -> Request or Error (see decode.h). Parses without exceptions and checks every
// member; a Reader keeps the first problem found and turns later reads into no-ops.
//
// Thread contract: any thread; no shared state.
#include "pitchwire/protocol/decode.h"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <exception>
#include <initializer_list>
#include <string>

#include "pitchwire/dsp/units.h"

namespace pitchwire::protocol {
namespace {

constexpr std::size_t kShownBytes = 40;  // values quoted in error messages are cut to about this length

std::size_t code_points(std::string_view s) {
  return static_cast<std::size_t>(
      std::count_if(s.begin(), s.end(), [](char c) { return (static_cast<unsigned char>(c) & 0xC0) != 0x80; }));
}

bool has_control(std::string_view s) {
  return std::any_of(s.begin(), s.end(), [](char c) {
    const auto u = static_cast<unsigned char>(c);
    return u < 0x20 || u == 0x7F;
  });
}

bool is_name(std::string_view s) {
  return std::all_of(s.begin(), s.end(), [](char c) {
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '_' || c == '.' ||
           c == '-';
  });
}

// A value as JSON text on one line, cut at a code-point boundary.
std::string shown(const Json& value) {
  std::string s = value.dump(-1, ' ', false, Json::error_handler_t::replace);
  if (s.size() <= kShownBytes) return s;
  std::size_t cut = kShownBytes;
  while (cut > 0 && (static_cast<unsigned char>(s[cut]) & 0xC0) == 0x80) --cut;
  s.resize(cut);
  return s + "...";
}

std::string number_text(double v) {
  std::array<char, 32> buf{};
  const auto [end, ec] = std::to_chars(buf.data(), buf.data() + buf.size(), v, std::chars_format::general, 6);
  return ec == std::errc() ? std::string(buf.data(), end) : std::string("?");
}

template <typename Names>
std::string joined(const Names& names) {
  std::string out;
  for (const std::string_view n : names) {
    if (!out.empty()) out += ", ";
    out += n;
  }
  return out;
}

// Records where nlohmann's parser stopped, for the bad_json message. Accepts every other event.
struct ErrorPosition {
  std::size_t byte = 0;
  bool null() { return true; }
  bool boolean(bool) { return true; }
  bool number_integer(Json::number_integer_t) { return true; }
  bool number_unsigned(Json::number_unsigned_t) { return true; }
  bool number_float(Json::number_float_t, const std::string&) { return true; }
  bool string(std::string&) { return true; }
  bool binary(Json::binary_t&) { return true; }
  bool start_object(std::size_t) { return true; }
  bool key(std::string&) { return true; }
  bool end_object() { return true; }
  bool start_array(std::size_t) { return true; }
  bool end_array() { return true; }
  bool parse_error(std::size_t position, const std::string&, const nlohmann::detail::exception&) {
    byte = position;
    return false;
  }
};

constexpr std::string_view kLimitForms = "a number in Hz, a note name such as \"A3\", or semitones such as \"-2st\"";

class Reader {
 public:
  Reader(const Json& object, std::string_view type) : object_(object), type_(type) {}

  [[nodiscard]] bool ok() const { return !error_.has_value(); }
  [[nodiscard]] Error take_error(const std::string& id) {
    Error e = std::move(*error_);
    e.id = id;
    return e;
  }

  void fail(ErrorCode code, std::string_view field, std::string_view problem, std::string_view allowed) {
    if (error_) return;
    std::string message(type_);
    if (!field.empty()) message.append(".").append(field);
    message.append(": ").append(problem);
    if (!allowed.empty()) message.append("; allowed: ").append(allowed);
    error_ = Error{code, std::move(message), {}};
  }

  // The member, or null when absent (missing_field when required).
  const Json* member(std::string_view key, bool required, std::string_view allowed) {
    if (!ok()) return nullptr;
    const auto it = object_.find(key);
    if (it == object_.end()) {
      if (required) fail(ErrorCode::kMissingField, key, "missing", allowed);
      return nullptr;
    }
    return &*it;
  }

  void only(std::initializer_list<std::string_view> keys) {
    for (const auto& item : object_.items()) {
      if (!ok()) return;
      if (std::find(keys.begin(), keys.end(), item.key()) == keys.end()) {
        fail(ErrorCode::kUnknownField, item.key(), "not a member of " + std::string(type_), joined(keys));
      }
    }
  }

  // A string of min..max code points without control characters; `name_chars` limits it to A-Z a-z 0-9 _ . -
  std::optional<std::string> text(std::string_view key, bool required, std::size_t min_chars,
                                  std::size_t max_chars, bool name_chars) {
    const std::string allowed = "a string of " + std::to_string(min_chars) + " to " + std::to_string(max_chars) +
                                (name_chars ? " letters, digits, '_', '.' or '-'" : " characters");
    const Json* v = member(key, required, allowed);
    if (!v) return std::nullopt;
    return text_value(*v, key, min_chars, max_chars, name_chars, allowed);
  }

  std::optional<std::string> text_value(const Json& v, std::string_view field, std::size_t min_chars,
                                        std::size_t max_chars, bool name_chars, const std::string& allowed) {
    if (!v.is_string()) {
      fail(ErrorCode::kWrongType, field, shown(v) + " is not a string", allowed);
      return std::nullopt;
    }
    const auto& s = v.get_ref<const std::string&>();
    const std::size_t n = code_points(s);
    if (n > max_chars) {
      fail(ErrorCode::kTooLarge, field, std::to_string(n) + " characters is too long", allowed);
    } else if (n < min_chars) {
      fail(ErrorCode::kOutOfRange, field, shown(v) + " is too short", allowed);
    } else if (has_control(s)) {
      fail(ErrorCode::kOutOfRange, field, shown(v) + " holds control characters", allowed);
    } else if (name_chars && !is_name(s)) {
      fail(ErrorCode::kOutOfRange, field, shown(v) + " holds a character that is not allowed", allowed);
    }
    return ok() ? std::optional<std::string>(s) : std::nullopt;
  }

  std::optional<bool> boolean(std::string_view key) {
    const Json* v = member(key, false, "true or false");
    if (!v) return std::nullopt;
    if (!v->is_boolean()) {
      fail(ErrorCode::kWrongType, key, shown(*v) + " is not a boolean", "true or false");
      return std::nullopt;
    }
    return v->get<bool>();
  }

  std::optional<Rate> rate() {
    constexpr std::string_view allowed = "\"hop\", {\"every\": n} with n in 1..10000, or {\"fps\": x} with x in (0, 1000]";
    const Json* v = member("rate", false, allowed);
    if (!v) return std::nullopt;
    if (v->is_string()) {
      if (v->get_ref<const std::string&>() == "hop") return Rate{};
      fail(ErrorCode::kOutOfRange, "rate", shown(*v) + " is not a rate", allowed);
      return std::nullopt;
    }
    if (!v->is_object()) {
      fail(ErrorCode::kWrongType, "rate", shown(*v) + " is neither a string nor an object", allowed);
      return std::nullopt;
    }
    for (const auto& item : v->items()) {
      if (item.key() != "every" && item.key() != "fps") {
        fail(ErrorCode::kUnknownField, "rate." + item.key(), "not a member of rate", "every, fps");
      }
    }
    if (!ok()) return std::nullopt;
    if (v->size() != 1) {
      fail(ErrorCode::kOutOfRange, "rate", shown(*v) + " has " + std::to_string(v->size()) + " members", allowed);
      return std::nullopt;
    }
    Rate r;
    if (const auto it = v->find("every"); it != v->end()) {
      const bool integral = it->is_number_integer() ||
                            (it->is_number_float() && std::trunc(it->get<double>()) == it->get<double>());
      if (!integral) {
        fail(ErrorCode::kWrongType, "rate.every", shown(*it) + " is not an integer", "an integer 1..10000");
        return std::nullopt;
      }
      const double n = it->get<double>();
      if (n < 1 || n > kMaxEvery) {
        fail(ErrorCode::kOutOfRange, "rate.every", shown(*it) + " is out of range", "an integer 1..10000");
        return std::nullopt;
      }
      r.kind = Rate::Kind::kEvery;
      r.every = static_cast<int>(n);
      return r;
    }
    const Json& fps = v->at("fps");
    if (!fps.is_number()) {
      fail(ErrorCode::kWrongType, "rate.fps", shown(fps) + " is not a number", "a number in (0, 1000]");
      return std::nullopt;
    }
    const double x = fps.get<double>();
    if (!(std::isfinite(x) && x > 0.0 && x <= kMaxFps)) {
      fail(ErrorCode::kOutOfRange, "rate.fps", shown(fps) + " is out of range", "a number in (0, 1000]");
      return std::nullopt;
    }
    r.kind = Rate::Kind::kFps;
    r.fps = x;
    return r;
  }

  std::optional<FieldSet> fields() {
    const std::string allowed = "an array of " + joined(kFrameFieldNames);
    const Json* v = member("fields", false, allowed);
    if (!v) return std::nullopt;
    if (!v->is_array()) {
      fail(ErrorCode::kWrongType, "fields", shown(*v) + " is not an array", allowed);
      return std::nullopt;
    }
    FieldSet set = FieldSet::none();
    for (std::size_t i = 0; i < v->size() && ok(); ++i) {
      const Json& e = (*v)[i];
      const std::string field = "fields[" + std::to_string(i) + "]";
      if (!e.is_string()) {
        fail(ErrorCode::kWrongType, field, shown(e) + " is not a string", allowed);
        break;
      }
      const auto it = std::find(kFrameFieldNames.begin(), kFrameFieldNames.end(), e.get_ref<const std::string&>());
      if (it == kFrameFieldNames.end()) {
        fail(ErrorCode::kOutOfRange, field, shown(e) + " is not a frame field", joined(kFrameFieldNames));
        break;
      }
      set = set.with(static_cast<FrameField>(it - kFrameFieldNames.begin()));
    }
    return ok() ? std::optional<FieldSet>(set) : std::nullopt;
  }

  // A band limit in Hz, inside [options.f0_min_hz, options.f0_max_hz].
  std::optional<double> limit(std::string_view key, const DecodeOptions& options) {
    const Json* v = member(key, true, kLimitForms);
    if (!v) return std::nullopt;
    double hz = 0.0;
    if (v->is_number()) {
      hz = v->get<double>();
    } else if (v->is_string()) {
      const auto parsed = parse_band_limit(v->get_ref<const std::string&>(), options.reference_hz);
      if (!parsed) {
        fail(ErrorCode::kBadNote, key, shown(*v) + " is neither a note name nor semitones", kLimitForms);
        return std::nullopt;
      }
      hz = *parsed;
    } else {
      fail(ErrorCode::kWrongType, key, shown(*v) + " is neither a number nor a string", kLimitForms);
      return std::nullopt;
    }
    if (!std::isfinite(hz) || hz < options.f0_min_hz || hz > options.f0_max_hz) {
      const std::string as_hz = v->is_number() ? std::string() : " (" + number_text(hz) + " Hz)";
      fail(ErrorCode::kBadBand, key, shown(*v) + as_hz + " is outside the search range",
           number_text(options.f0_min_hz) + " to " + number_text(options.f0_max_hz) + " Hz");
      return std::nullopt;
    }
    return hz;
  }

  std::optional<Json> data() {
    constexpr std::string_view allowed = "an object of at most 4096 bytes as compact JSON";
    const Json* v = member("data", false, allowed);
    if (!v) return std::nullopt;
    if (!v->is_object()) {
      fail(ErrorCode::kWrongType, "data", shown(*v) + " is not an object", allowed);
      return std::nullopt;
    }
    const std::size_t bytes = v->dump(-1, ' ', false, Json::error_handler_t::replace).size();
    if (bytes > kMaxMarkDataBytes) {
      fail(ErrorCode::kTooLarge, "data", std::to_string(bytes) + " bytes is too large", allowed);
      return std::nullopt;
    }
    return *v;
  }

 private:
  const Json& object_;
  std::string_view type_;
  std::optional<Error> error_;
};

Decoded decode_body(ClientType type, const std::string& id, Reader& r, const DecodeOptions& options) {
  auto done = [&](Request request) -> Decoded {
    if (!r.ok()) return r.take_error(id);
    return request;
  };
  switch (type) {
    case ClientType::kSubscribe: {
      r.only({"type", "id", "rate", "fields", "settled"});
      Subscribe s{id, r.rate().value_or(Rate{}), FieldSet::all(), false};
      s.fields = r.fields().value_or(FieldSet::all());
      s.settled = r.boolean("settled").value_or(false);
      return done(std::move(s));
    }
    case ClientType::kSetBand: {
      r.only({"type", "id", "name", "low", "high"});
      SetBand s{id, {}};
      s.band.name = r.text("name", true, 1, kMaxNameChars, true).value_or("");
      s.band.low_hz = r.limit("low", options).value_or(0.0);
      s.band.high_hz = r.limit("high", options).value_or(0.0);
      if (r.ok() && !(s.band.low_hz < s.band.high_hz)) {
        r.fail(ErrorCode::kBadBand, "low", number_text(s.band.low_hz) + " Hz is not below high " +
                                               number_text(s.band.high_hz) + " Hz", "low < high");
      }
      return done(std::move(s));
    }
    case ClientType::kClearBand: {
      r.only({"type", "id", "name"});
      ClearBand c{id, r.text("name", true, 1, kMaxNameChars, true).value_or("")};
      return done(std::move(c));
    }
    case ClientType::kStartExercise: {
      r.only({"type", "id", "preset", "label"});
      StartExercise s{id, r.text("preset", true, 1, kMaxPresetChars, true).value_or(""), {}};
      s.label = r.text("label", false, 0, kMaxLabelChars, false).value_or("");
      return done(std::move(s));
    }
    case ClientType::kEndExercise:
      r.only({"type", "id"});
      return done(EndExercise{id});
    case ClientType::kMark: {
      r.only({"type", "id", "label", "data"});
      Mark m{id, r.text("label", true, 1, kMaxLabelChars, false).value_or(""), nullptr};
      m.data = r.data().value_or(Json());
      return done(std::move(m));
    }
    case ClientType::kPing:
      r.only({"type", "id"});
      return done(Ping{id});
    case ClientType::kSetReference: {
      r.only({"type", "id", "reference"});
      SetReference s{id, r.limit("reference", options).value_or(0.0)};
      return done(std::move(s));
    }
  }
  return Error{ErrorCode::kInternal, "unhandled request type", id};
}

Decoded decode_checked(std::string_view text, const DecodeOptions& options) {
  if (text.size() > options.max_message_bytes) {
    return Error{ErrorCode::kTooLarge,
                 "message: " + std::to_string(text.size()) + " bytes is too large; allowed: at most " +
                     std::to_string(options.max_message_bytes) + " bytes",
                 {}};
  }
  const Json object = Json::parse(text, nullptr, false);
  if (object.is_discarded()) {
    ErrorPosition where;
    (void)Json::sax_parse(text, &where);
    return Error{ErrorCode::kBadJson,
                 "message: not valid JSON (stopped at byte " + std::to_string(where.byte) + "); allowed: one JSON object",
                 {}};
  }
  if (!object.is_object()) {
    return Error{ErrorCode::kNotAnObject, "message: " + shown(object) + " is not an object; allowed: one JSON object", {}};
  }
  const std::string client_types = joined(kClientTypeNames);
  const auto type_member = object.find("type");
  if (type_member == object.end()) {
    return Error{ErrorCode::kMissingField, "message.type: missing; allowed: " + client_types, {}};
  }
  if (!type_member->is_string()) {
    return Error{ErrorCode::kWrongType,
                 "message.type: " + shown(*type_member) + " is not a string; allowed: " + client_types, {}};
  }
  const auto it = std::find(kClientTypeNames.begin(), kClientTypeNames.end(),
                            type_member->get_ref<const std::string&>());
  if (it == kClientTypeNames.end()) {
    return Error{ErrorCode::kUnknownType,
                 "message.type: " + shown(*type_member) + " is not a request type; allowed: " + client_types, {}};
  }
  const auto type = static_cast<ClientType>(it - kClientTypeNames.begin());
  Reader r(object, *it);
  const auto id = r.text("id", true, 1, kMaxIdChars, false);
  if (!r.ok()) return r.take_error({});
  return decode_body(type, *id, r, options);
}

}  // namespace

std::optional<double> parse_band_limit(std::string_view text, double reference_hz) {
  auto trim = [](std::string_view s) {
    while (!s.empty() && s.front() == ' ') s.remove_prefix(1);
    while (!s.empty() && s.back() == ' ') s.remove_suffix(1);
    return s;
  };
  text = trim(text);
  if (text.size() > 2 && text.substr(text.size() - 2) == "st") {
    std::string_view number = trim(text.substr(0, text.size() - 2));
    if (!number.empty() && number.front() == '+') {  // from_chars reads no '+'
      number.remove_prefix(1);
      if (!number.empty() && number.front() == '-') return std::nullopt;
    }
    double st = 0.0;
    const auto [end, ec] = std::from_chars(number.data(), number.data() + number.size(), st);
    if (ec != std::errc() || end != number.data() + number.size() || !std::isfinite(st)) return std::nullopt;
    // Far enough from the reference, 2^(st/12) overflows to infinity or underflows to 0: not a frequency.
    const double hz = dsp::hz_from_semitones(st, reference_hz);
    if (!std::isfinite(hz) || !(hz > 0.0)) return std::nullopt;
    return hz;
  }
  return dsp::hz_from_note_name(text);
}

Decoded decode_request(std::string_view text, const DecodeOptions& options) noexcept {
  try {
    return decode_checked(text, options);
  } catch (const std::exception& e) {  // not expected: every access above is checked first
    return Error{ErrorCode::kInternal, std::string("message: could not be decoded: ") + e.what(), {}};
  }
}

}  // namespace pitchwire::protocol
