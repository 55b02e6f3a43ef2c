// Decoding client messages: round trips, one bad input for every error code, the size limit, band limits
// in Hz, note names and semitones, and inputs that must not break the decoder.
// Note frequencies: equal temperament with A4 = 440 Hz (ISO 16:1975).
//
// Thread contract: tests run on one thread; no shared state.
#include "pitchwire/protocol/decode.h"
#include "pitchwire/protocol/encode.h"

#include <gtest/gtest.h>

#include <random>
#include <string>
#include <vector>

namespace pitchwire::protocol {
namespace {

Request decoded_ok(std::string_view text, const DecodeOptions& options = {}) {
  const Decoded d = decode_request(text, options);
  if (const auto* e = std::get_if<Error>(&d)) {
    ADD_FAILURE() << "rejected: " << text << " -> " << name(e->code) << ": " << e->message;
    return Ping{};
  }
  return std::get<Request>(d);
}

Error decoded_error(std::string_view text, const DecodeOptions& options = {}) {
  const Decoded d = decode_request(text, options);
  if (const auto* e = std::get_if<Error>(&d)) return *e;
  ADD_FAILURE() << "accepted: " << text;
  return {};
}

TEST(ProtocolDecode, EveryRequestRoundTrips) {
  const std::vector<Request> requests = {
      Subscribe{"s1", Rate{}, FieldSet::all(), false},
      Subscribe{"s2", Rate{Rate::Kind::kEvery, 4, 0.0}, FieldSet::none().with(FrameField::kF0Hz), true},
      Subscribe{"s3", Rate{Rate::Kind::kFps, 1, 37.5}, FieldSet::none(), false},
      SetBand{"b1", Band{"target", 165.0, 220.0}},
      SetBand{"b2", Band{"upper.range-2", 261.6255653005986, 329.6275569128699}},
      ClearBand{"c1", "target"},
      StartExercise{"x1", "glide", "Glide up, siren"},
      StartExercise{"x2", "sustained_a", ""},
      EndExercise{"x3"},
      Mark{"m1", "trial 12 onset", Json{{"trial", 12}, {"condition", "loud"}, {"nested", {{"a", {1, 2}}}}}},
      Mark{"m2", "täst ✓", nullptr},
      Ping{"p1"},
      SetReference{"r1", 195.5},
  };
  for (const auto& request : requests) {
    const std::string text = encode_request(request);
    SCOPED_TRACE(text);
    EXPECT_EQ(decoded_ok(text), request);
  }
}

// The reference as a number in Hz, a note name (G3 = 440 * 2^(-14/12) = 195.998 Hz, A4 = 440 Hz) or semitones
// re the current reference (+12 st re 100 Hz = 200 Hz); outside the search range it is refused.
TEST(ProtocolDecode, SetReferenceTakesHzNotesAndSemitonesReTheCurrentOne) {
  EXPECT_DOUBLE_EQ(std::get<SetReference>(decoded_ok(R"({"type":"set_reference","id":"r","reference":180})")).reference_hz,
                   180.0);
  EXPECT_NEAR(std::get<SetReference>(decoded_ok(R"({"type":"set_reference","id":"r","reference":"G3"})")).reference_hz,
              195.998, 0.001);
  EXPECT_NEAR(std::get<SetReference>(decoded_ok(R"({"type":"set_reference","id":"r","reference":"+12st"})")).reference_hz,
              200.0, 1e-9);
  const auto low = decode_request(R"({"type":"set_reference","id":"r","reference":"A0"})");
  ASSERT_TRUE(std::holds_alternative<Error>(low));
  EXPECT_EQ(std::get<Error>(low).code, ErrorCode::kBadBand);
  const auto none = decode_request(R"({"type":"set_reference","id":"r"})");
  ASSERT_TRUE(std::holds_alternative<Error>(none));
  EXPECT_EQ(std::get<Error>(none).code, ErrorCode::kMissingField);
}

TEST(ProtocolDecode, SubscribeDefaultsAndRateForms) {
  const auto s = std::get<Subscribe>(decoded_ok(R"({"type":"subscribe","id":"a"})"));
  EXPECT_EQ(s.rate.kind, Rate::Kind::kHop);
  EXPECT_EQ(s.fields, FieldSet::all());
  EXPECT_FALSE(s.settled);

  const auto every = std::get<Subscribe>(decoded_ok(R"({"type":"subscribe","id":"a","rate":{"every":3.0}})"));
  EXPECT_EQ(every.rate, (Rate{Rate::Kind::kEvery, 3, 0.0}));
  const auto fps = std::get<Subscribe>(
      decoded_ok(R"({"type":"subscribe","id":"a","rate":{"fps":60},"fields":["level_dbfs","f0_hz"],"settled":true})"));
  EXPECT_EQ(fps.rate.kind, Rate::Kind::kFps);
  EXPECT_DOUBLE_EQ(fps.rate.fps, 60.0);
  EXPECT_TRUE(fps.fields.has(FrameField::kF0Hz));
  EXPECT_TRUE(fps.fields.has(FrameField::kLevelDbfs));
  EXPECT_FALSE(fps.fields.has(FrameField::kVoicing));
  EXPECT_TRUE(fps.settled);
}

struct BadInput {
  std::string text;
  ErrorCode code;
  std::string names;  // the message must contain this (the field)
};

TEST(ProtocolDecode, EveryErrorCodeHasABadInput) {
  const std::string big_data = R"({"type":"mark","id":"m","label":"x","data":{"blob":")" + std::string(4100, 'a') + "\"}}";
  const std::vector<BadInput> cases = {
      {R"({"type":"ping","id":"p")", ErrorCode::kBadJson, "not valid JSON"},
      {"", ErrorCode::kBadJson, "not valid JSON"},
      {R"(["ping"])", ErrorCode::kNotAnObject, "is not an object"},
      {R"({"type":"dance","id":"1"})", ErrorCode::kUnknownType, "message.type: \"dance\""},
      {R"({"type":"ping","id":"1","extra":true})", ErrorCode::kUnknownField, "ping.extra"},
      {R"({"type":"subscribe","id":"1","rate":{"every":2,"phase":1}})", ErrorCode::kUnknownField, "subscribe.rate.phase"},
      {R"({"id":"1"})", ErrorCode::kMissingField, "message.type: missing"},
      {R"({"type":"ping"})", ErrorCode::kMissingField, "ping.id: missing"},
      {R"({"type":"set_band","id":"1","name":"t","low":165})", ErrorCode::kMissingField, "set_band.high: missing"},
      {R"({"type":7,"id":"1"})", ErrorCode::kWrongType, "message.type"},
      {R"({"type":"ping","id":12})", ErrorCode::kWrongType, "ping.id"},
      {R"({"type":"subscribe","id":"1","settled":"yes"})", ErrorCode::kWrongType, "subscribe.settled"},
      {R"({"type":"subscribe","id":"1","rate":5})", ErrorCode::kWrongType, "subscribe.rate"},
      {R"({"type":"subscribe","id":"1","rate":{"every":2.5}})", ErrorCode::kWrongType, "subscribe.rate.every"},
      {R"({"type":"subscribe","id":"1","fields":"f0_hz"})", ErrorCode::kWrongType, "subscribe.fields"},
      {R"({"type":"set_band","id":"1","name":"t","low":true,"high":200})", ErrorCode::kWrongType, "set_band.low"},
      {R"({"type":"mark","id":"1","label":"x","data":[1,2]})", ErrorCode::kWrongType, "mark.data"},
      {R"({"type":"subscribe","id":"1","rate":{"every":0}})", ErrorCode::kOutOfRange, "subscribe.rate.every"},
      {R"({"type":"subscribe","id":"1","rate":{"fps":0}})", ErrorCode::kOutOfRange, "subscribe.rate.fps"},
      {R"({"type":"subscribe","id":"1","rate":{"fps":1001}})", ErrorCode::kOutOfRange, "subscribe.rate.fps"},
      {R"({"type":"subscribe","id":"1","rate":"fast"})", ErrorCode::kOutOfRange, "subscribe.rate"},
      {R"({"type":"subscribe","id":"1","rate":{}})", ErrorCode::kOutOfRange, "subscribe.rate"},
      {R"({"type":"subscribe","id":"1","fields":["f0_hz","pitch"]})", ErrorCode::kOutOfRange, "subscribe.fields[1]"},
      {R"({"type":"ping","id":""})", ErrorCode::kOutOfRange, "ping.id"},
      {R"({"type":"clear_band","id":"1","name":"my band"})", ErrorCode::kOutOfRange, "clear_band.name"},
      {R"({"type":"mark","id":"1","label":"two\nlines"})", ErrorCode::kOutOfRange, "mark.label"},
      {R"({"type":"mark","id":"1","label":""})", ErrorCode::kOutOfRange, "mark.label"},
      {R"({"type":"mark","id":"1","label":")" + std::string(201, 'x') + "\"}", ErrorCode::kTooLarge, "mark.label"},
      {R"({"type":"ping","id":")" + std::string(65, 'i') + "\"}", ErrorCode::kTooLarge, "ping.id"},
      {big_data, ErrorCode::kTooLarge, "mark.data"},
      {R"({"type":"set_band","id":"1","name":"t","low":220,"high":165})", ErrorCode::kBadBand, "set_band.low"},
      {R"({"type":"set_band","id":"1","name":"t","low":"A3","high":"A3"})", ErrorCode::kBadBand, "set_band.low"},
      {R"({"type":"set_band","id":"1","name":"t","low":30,"high":200})", ErrorCode::kBadBand, "set_band.low"},
      {R"({"type":"set_band","id":"1","name":"t","low":"A2","high":"C8"})", ErrorCode::kBadBand, "set_band.high"},
      {R"({"type":"set_band","id":"1","name":"t","low":"-40st","high":200})", ErrorCode::kBadBand, "set_band.low"},
      {R"({"type":"set_band","id":"1","name":"t","low":"H3","high":200})", ErrorCode::kBadNote, "set_band.low"},
      {R"({"type":"set_band","id":"1","name":"t","low":150,"high":"3 semitones"})", ErrorCode::kBadNote, "set_band.high"},
      {R"({"type":"set_band","id":"1","name":"t","low":"+-2st","high":200})", ErrorCode::kBadNote, "set_band.low"},
  };
  std::vector<bool> seen(kErrorCodeNames.size(), false);
  for (const auto& c : cases) {
    SCOPED_TRACE(c.text.substr(0, 120));
    const Error e = decoded_error(c.text);
    EXPECT_EQ(name(e.code), name(c.code));
    EXPECT_NE(e.message.find(c.names), std::string::npos) << e.message;
    EXPECT_EQ(e.message.find('\n'), std::string::npos) << "one line";
    EXPECT_LT(e.message.size(), 400u) << "values are abbreviated";
    seen[static_cast<std::size_t>(c.code)] = true;
  }
  for (std::size_t i = 0; i <= static_cast<std::size_t>(ErrorCode::kBadNote); ++i) {
    EXPECT_TRUE(seen[i]) << "no bad input for " << kErrorCodeNames[i];
  }
}

TEST(ProtocolDecode, MessagesNameTheFieldTheValueAndWhatIsAllowed) {
  EXPECT_EQ(decoded_error(R"({"type":"subscribe","id":"q","rate":{"every":0}})").message,
            "subscribe.rate.every: 0 is out of range; allowed: an integer 1..10000");
  EXPECT_EQ(decoded_error(R"({"type":"set_band","id":"q","name":"t","low":"H3","high":200})").message,
            "set_band.low: \"H3\" is neither a note name nor semitones; allowed: a number in Hz, a note name such "
            "as \"A3\", or semitones such as \"-2st\"");
  EXPECT_EQ(decoded_error(R"({"type":"set_band","id":"q","name":"t","low":1500,"high":1600})").message,
            "set_band.low: 1500 is outside the search range; allowed: 50 to 1400 Hz");
}

TEST(ProtocolDecode, LongValuesAreAbbreviated) {
  const std::string value(500, 'z');
  const Error e = decoded_error(R"({"type":"dance)" + value + R"(","id":"1"})");
  EXPECT_EQ(e.code, ErrorCode::kUnknownType);
  EXPECT_NE(e.message.find("\"dancezzz"), std::string::npos);
  EXPECT_NE(e.message.find("..."), std::string::npos);
  EXPECT_LT(e.message.size(), 200u);
}

TEST(ProtocolDecode, ErrorsCarryTheIdOnceItIsKnown) {
  EXPECT_EQ(decoded_error(R"({"type":"mark","id":"m7","label":5})").id, "m7");
  EXPECT_EQ(decoded_error(R"({"type":"mark","id":5,"label":"x"})").id, "");
  EXPECT_EQ(decoded_error(R"({"type":"nope","id":"m7"})").id, "") << "the id of an unknown type is not read";
  EXPECT_EQ(decoded_error("{").id, "");
}

TEST(ProtocolDecode, SizeLimit) {
  std::string text = R"({"type":"mark","id":"1","label":"x","data":{"pad":""}})";
  const std::size_t pad = 300 - text.size();
  text.insert(text.size() - 3, std::string(pad, ' '));  // inside the pad string: still valid
  ASSERT_EQ(text.size(), 300u);
  DecodeOptions options;
  options.max_message_bytes = 300;
  EXPECT_TRUE(std::holds_alternative<Request>(decode_request(text, options)));
  options.max_message_bytes = 299;
  const Error e = decoded_error(text, options);
  EXPECT_EQ(e.code, ErrorCode::kTooLarge);
  EXPECT_EQ(e.message, "message: 300 bytes is too large; allowed: at most 299 bytes");

  const std::string huge(kDefaultMaxMessageBytes + 1, '[');  // rejected before parsing
  EXPECT_EQ(decoded_error(huge).code, ErrorCode::kTooLarge);
}

TEST(ProtocolDecode, BandLimitsInHzNotesAndSemitones) {
  DecodeOptions options;
  options.reference_hz = 200.0;
  const auto band = [&](std::string_view low, std::string_view high) {
    const std::string text = R"({"type":"set_band","id":"b","name":"t","low":)" + std::string(low) +
                             R"(,"high":)" + std::string(high) + "}";
    return std::get<SetBand>(decoded_ok(text, options)).band;
  };
  const Band hz = band("165", "220.5");
  EXPECT_DOUBLE_EQ(hz.low_hz, 165.0);
  EXPECT_DOUBLE_EQ(hz.high_hz, 220.5);
  const Band notes = band(R"("A3")", R"("e4")");
  EXPECT_NEAR(notes.low_hz, 220.0, 1e-9);
  EXPECT_NEAR(notes.high_hz, 329.6276, 1e-4);  // E4
  const Band sharps = band(R"("C#3")", R"("Db4")");
  EXPECT_NEAR(sharps.low_hz, 138.5913, 1e-4);  // C#3
  EXPECT_NEAR(sharps.high_hz, 277.1826, 1e-4);  // C#4 = Db4
  const Band st = band(R"("-12st")", R"(" +3.5 st ")");
  EXPECT_NEAR(st.low_hz, 100.0, 1e-9);                          // an octave below 200 Hz
  EXPECT_NEAR(st.high_hz, 200.0 * std::exp2(3.5 / 12.0), 1e-9);  // 12*log2(f/ref) = 3.5
  const Band mixed = band("110", R"("0st")");
  EXPECT_DOUBLE_EQ(mixed.high_hz, 200.0);

  EXPECT_NEAR(*parse_band_limit("A4", 100.0), 440.0, 1e-9);
  EXPECT_NEAR(*parse_band_limit("12st", 100.0), 200.0, 1e-9);
  EXPECT_NEAR(*parse_band_limit("-0.5st", 100.0), 100.0 * std::exp2(-0.5 / 12.0), 1e-12);
  // "+1e33 st" and "-1e33st": found by fuzz_band_limit (tests/fuzz): 2^(st/12) overflows to infinity or
  // underflows to 0, which is no frequency.
  for (const char* bad : {"", "st", "A", "H2", "A10", "3", "220Hz", "3 semitones", "+-1st", "1st st", "nanst",
                          "+1e33 st", "-1e33st", "99999st"}) {
    SCOPED_TRACE(bad);
    EXPECT_FALSE(parse_band_limit(bad, 100.0).has_value());
  }
}

TEST(ProtocolDecode, SearchRangeComesFromTheOptions) {
  DecodeOptions options;
  options.f0_min_hz = 60.0;
  options.f0_max_hz = 1000.0;
  EXPECT_EQ(decoded_error(R"({"type":"set_band","id":"q","name":"t","low":"A1","high":200})", options).message,
            "set_band.low: \"A1\" (55 Hz) is outside the search range; allowed: 60 to 1000 Hz");
  options.f0_min_hz = 50.0;
  EXPECT_NO_FATAL_FAILURE(decoded_ok(R"({"type":"set_band","id":"q","name":"t","low":"A1","high":200})", options));
}

TEST(ProtocolDecode, LabelsCountCharactersNotBytes) {
  std::string label;
  for (int i = 0; i < 200; ++i) label += "\xC3\xA9";  // é, two bytes in UTF-8
  const auto m = std::get<Mark>(decoded_ok(R"({"type":"mark","id":"1","label":")" + label + "\"}"));
  EXPECT_EQ(m.label, label);
  EXPECT_EQ(decoded_error(R"({"type":"mark","id":"1","label":")" + label + "e\"}").code, ErrorCode::kTooLarge);
}

TEST(ProtocolDecode, MarkDataUpToItsLimit) {
  const std::string prefix = R"({"type":"mark","id":"1","label":"x","data":{"k":")";
  const std::string fits(kMaxMarkDataBytes - std::string(R"({"k":""})").size(), 'a');
  const auto m = std::get<Mark>(decoded_ok(prefix + fits + "\"}}"));
  EXPECT_EQ(m.data.dump().size(), kMaxMarkDataBytes);
  EXPECT_EQ(decoded_error(prefix + fits + "a\"}}").code, ErrorCode::kTooLarge);
}

TEST(ProtocolDecode, AnyInputGivesARequestOrAnError) {
  // Every prefix of valid messages, random bytes, invalid UTF-8 and deep nesting: no exception, no crash.
  std::vector<std::string> inputs = {
      std::string(8000, '[') + std::string(8000, ']'),
      std::string(5000, '{'),
      "{\"type\":\"mark\",\"id\":\"1\",\"label\":\"\xFF\xFE\"}",
      "\xEF\xBB\xBF{\"type\":\"ping\",\"id\":\"1\"}",
      "{\"type\":\"ping\",\"id\":\"1\"}  ",
      "{\"type\":\"ping\",\"id\":\"1\"} {}",
      "null", "1e999", "\"ping\"", "{\"type\":null}", "{\"type\":\"mark\",\"id\":\"1\",\"label\":\"x\",\"data\":null}",
  };
  for (const auto& full : {std::string(R"({"type":"set_band","id":"b","name":"t","low":"A3","high":"-2.5st"})"),
                           std::string(R"({"type":"subscribe","id":"s","rate":{"fps":30},"fields":["voicing"]})")}) {
    for (std::size_t n = 0; n <= full.size(); ++n) inputs.push_back(full.substr(0, n));
  }
  std::mt19937 rng(12345);
  std::uniform_int_distribution<int> byte(0, 255);
  for (int i = 0; i < 300; ++i) {
    std::string s(static_cast<std::size_t>(i % 64), '\0');
    for (auto& c : s) c = static_cast<char>(byte(rng));
    inputs.push_back(std::move(s));
  }
  for (const auto& input : inputs) {
    const Decoded d = decode_request(input);
    if (const auto* e = std::get_if<Error>(&d)) {
      EXPECT_NE(e->code, ErrorCode::kInternal) << e->message;
      EXPECT_FALSE(e->message.empty());
      EXPECT_NO_THROW((void)text(encode(*e), 1)) << "the error can be sent";
    }
  }
}

}  // namespace
}  // namespace pitchwire::protocol
