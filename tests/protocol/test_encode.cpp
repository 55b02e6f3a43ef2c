// Encoding server messages: exact text of frames (std::to_chars, fixed decimals, null when unvoiced, field
// selection), heads with a per-connection seq, the other messages read back, and the rate arithmetic.
//
// Thread contract: tests run on one thread; no shared state.
#include "pitchwire/protocol/encode.h"

#include <gtest/gtest.h>

#include <limits>
#include <string>

namespace pitchwire::protocol {
namespace {

dsp::LiveFrame voiced_frame() {
  dsp::LiveFrame f;
  f.index = 1234;
  f.time_s = 6.17;
  f.f0_hz = 220.125f;
  f.voicing = 0.9871f;
  f.confidence = 0.9124f;
  f.level_dbfs = -23.456f;
  return f;
}

Json read_back(const Encoded& e, std::uint64_t seq) {
  const Json j = Json::parse(text(e, seq), nullptr, false);
  EXPECT_FALSE(j.is_discarded()) << text(e, seq);
  EXPECT_EQ(j.value("type", ""), name(e.type));
  EXPECT_EQ(j.value("seq", std::uint64_t{0}), seq);
  return j;
}

TEST(ProtocolEncode, FrameTextIsExact) {
  EXPECT_EQ(text(encode_frame(voiced_frame(), FieldSet::all()), 42),
            R"({"type":"frame","seq":42,"index":1234,"time_s":6.170000,"f0_hz":220.125,"voicing":0.987,)"
            R"("confidence":0.912,"level_dbfs":-23.46})");
}

TEST(ProtocolEncode, UnvoicedFrameHasNullF0) {
  dsp::LiveFrame f = voiced_frame();
  f.f0_hz.reset();
  f.voicing = 0.1f;
  f.confidence = 0.0f;
  f.level_dbfs = -200.0f;
  EXPECT_EQ(text(encode_frame(f, FieldSet::all()), 1),
            R"({"type":"frame","seq":1,"index":1234,"time_s":6.170000,"f0_hz":null,"voicing":0.100,)"
            R"("confidence":0.000,"level_dbfs":-200.00})");
}

TEST(ProtocolEncode, FrameCarriesOnlyTheSelectedFields) {
  const auto f = voiced_frame();
  EXPECT_EQ(encode_frame(f, FieldSet::none()).body, R"(,"index":1234,"time_s":6.170000})");
  EXPECT_EQ(encode_frame(f, FieldSet::none().with(FrameField::kLevelDbfs)).body,
            R"(,"index":1234,"time_s":6.170000,"level_dbfs":-23.46})");
  EXPECT_EQ(encode_frame(f, FieldSet::none().with(FrameField::kConfidence).with(FrameField::kF0Hz)).body,
            R"(,"index":1234,"time_s":6.170000,"f0_hz":220.125,"confidence":0.912})");
}

TEST(ProtocolEncode, NonFiniteNumbersBecomeNull) {
  dsp::LiveFrame f = voiced_frame();
  f.f0_hz = std::numeric_limits<float>::quiet_NaN();
  f.level_dbfs = -std::numeric_limits<float>::infinity();
  const Json j = read_back(encode_frame(f, FieldSet::all()), 3);
  EXPECT_TRUE(j["f0_hz"].is_null());
  EXPECT_TRUE(j["level_dbfs"].is_null());
}

TEST(ProtocolEncode, SettledFrameTextIsExact) {
  dsp::SettledFrame s;
  s.index = 1222;
  s.time_s = 6.11;
  s.f0_hz = 219.875f;  // exact in binary: no rounding question
  s.live_f0_hz = 110.0f;
  EXPECT_EQ(text(encode_settled(s), 43), R"({"type":"settled","seq":43,"index":1222,"time_s":6.110000,"f0_hz":219.875})");
  s.f0_hz.reset();
  EXPECT_EQ(encode_settled(s).body, R"(,"index":1222,"time_s":6.110000,"f0_hz":null})");
}

TEST(ProtocolEncode, OneBodyManyConnections) {
  // The body is encoded once; each connection puts its own head in front (gather write or text()).
  const Encoded e = encode_frame(voiced_frame(), FieldSet::all());
  const MessageHead a(e.type, 1);
  const MessageHead b(e.type, 99);
  EXPECT_EQ(a.view(), R"({"type":"frame","seq":1)");
  EXPECT_EQ(std::string(b.view()) + e.body, text(e, 99));
  const MessageHead widest(ServerType::kSettled, std::numeric_limits<std::uint64_t>::max());
  EXPECT_EQ(widest.view(), R"({"type":"settled","seq":18446744073709551615)");
}

TEST(ProtocolEncode, HelloReadsBack) {
  Hello h;
  h.server_version = "0.1.0";
  h.audio = {48000.0, 0};
  h.role = Role::kSupervisor;
  h.bands = {{"target", 165.0, 220.0}};
  h.exercise = Exercise{"glide", "Glide 1", 12.5};
  const Json j = read_back(encode(h), 1);
  EXPECT_EQ(j["protocol"], kProtocolVersion);
  EXPECT_EQ(j["audio"]["channel"], "mixdown");
  EXPECT_EQ(j["audio"]["sample_rate_hz"], 48000.0);
  EXPECT_EQ(j["hop_ms"], 5.0);
  EXPECT_EQ(j["f0_range_hz"]["max"], 1400.0);
  EXPECT_EQ(j["role"], "supervisor");
  EXPECT_EQ(j["bands"][0]["low_hz"], 165.0);
  EXPECT_EQ(j["exercise"]["preset"], "glide");
  EXPECT_EQ(j["fields"], Json({"f0_hz", "voicing", "confidence", "level_dbfs"}));
  EXPECT_EQ(j["limits"]["max_message_bytes"], kDefaultMaxMessageBytes);

  h.audio.channel = 2;
  h.exercise.reset();
  const Json k = read_back(encode(h), 1);
  EXPECT_EQ(k["audio"]["channel"], 2);
  EXPECT_TRUE(k["exercise"].is_null());
}

TEST(ProtocolEncode, OtherMessagesReadBack) {
  Stats st;
  st.time_s = 30.0;
  st.window_s = 10.0;
  st.voiced_fraction = 0.5;
  st.f0_p50_hz = 180.0;
  const Json s = read_back(encode(st), 7);
  EXPECT_EQ(s["f0_p50_hz"], 180.0);
  EXPECT_TRUE(s["f0_p5_hz"].is_null());

  const Json ev = read_back(encode(band_crossing_event(1.5, "target", BandPosition::kBelow, BandPosition::kInside, 1.25)), 8);
  EXPECT_EQ(ev["kind"], "band_crossing");
  EXPECT_EQ(ev["time_s"], 1.5);
  EXPECT_EQ(ev["payload"], Json({{"name", "target"}, {"from", "below"}, {"to", "inside"}, {"since_s", 1.25}}));
  EXPECT_FALSE(ev.contains("by"));  // the daemon's own
  Event changed = band_changed_event(2.0, "target", {});
  changed.by = Role::kSupervisor;
  EXPECT_EQ(read_back(encode(changed), 8)["by"], "supervisor");

  const Json err = read_back(encode(Error{ErrorCode::kForbidden, "set_band: needs the supervisor role", "b1"}), 9);
  EXPECT_EQ(err["code"], "forbidden");
  EXPECT_EQ(err["id"], "b1");
  EXPECT_FALSE(read_back(encode(Error{ErrorCode::kBadJson, "message: not valid JSON", ""}), 9).contains("id"));

  const Json pong = read_back(encode(Pong{"p", 2.25}), 10);
  EXPECT_EQ(pong["id"], "p");
  EXPECT_EQ(pong["time_s"], 2.25);

  const Json ack = read_back(encode(Ack{"c", ClientType::kClearBand, Json::object()}), 11);
  EXPECT_EQ(ack["request"], "clear_band");
  EXPECT_FALSE(ack.contains("result"));

  // Member order is the order written (readable logs), not alphabetical.
  EXPECT_EQ(text(encode(Pong{"p", 2.25}), 10), R"({"type":"pong","seq":10,"id":"p","time_s":2.25})");
}

TEST(ProtocolEncode, MarkerEventKeepsTheClientsData) {
  const Mark m{"m1", "onset", Json{{"trial", 3}, {"a", true}}};
  const Json ev = read_back(encode(marker_event(4.0, m)), 1);
  EXPECT_EQ(ev["payload"]["label"], "onset");
  EXPECT_EQ(ev["payload"]["data"].dump(), R"({"trial":3,"a":true})");
  EXPECT_FALSE(read_back(encode(marker_event(4.0, Mark{"m2", "x", nullptr})), 2)["payload"].contains("data"));
}

TEST(ProtocolRate, Decimation) {
  EXPECT_EQ(decimation(Rate{}, 5.0), 1);
  EXPECT_EQ(decimation(Rate{Rate::Kind::kEvery, 3, 0.0}, 5.0), 3);
  const auto fps = [](double x) { return Rate{Rate::Kind::kFps, 1, x}; };
  // 5 ms hops are 200 frames per second: n is the smallest with 200 / n <= fps.
  EXPECT_EQ(decimation(fps(200.0), 5.0), 1);
  EXPECT_EQ(decimation(fps(1000.0), 5.0), 1);
  EXPECT_EQ(decimation(fps(100.0), 5.0), 2);
  EXPECT_EQ(decimation(fps(50.0), 5.0), 4);   // exact ratio: not 5
  EXPECT_EQ(decimation(fps(60.0), 5.0), 4);   // 50 fps, never more than asked
  EXPECT_EQ(decimation(fps(30.0), 5.0), 7);   // 28.6 fps
  EXPECT_EQ(decimation(fps(0.5), 5.0), 400);
  EXPECT_EQ(decimation(fps(100.0), 2.5), 4);
  EXPECT_EQ(decimation(fps(100.0), 10.0), 1);
  EXPECT_EQ(decimation(fps(100.0 / 3.0), 10.0), 3);  // 33.33 fps from 100 fps: exactly every third
  EXPECT_EQ(decimation(fps(0.001), 2.5), kMaxEvery);

  int sent = 0;
  for (std::int64_t index = 0; index < 200; ++index) sent += passes(index, 4) ? 1 : 0;
  EXPECT_EQ(sent, 50);  // one second of 5 ms hops at n = 4
  EXPECT_TRUE(passes(0, 4));
  EXPECT_FALSE(passes(5, 4));
  EXPECT_TRUE(passes(5, 1));
}

TEST(ProtocolRate, SubscribeAckStatesWhatTheClientWillGet) {
  const Subscribe s{"s", Rate{Rate::Kind::kFps, 1, 60.0}, FieldSet::none().with(FrameField::kF0Hz), true};
  const Ack a = subscribe_ack(s, 5.0);
  EXPECT_EQ(a.id, "s");
  EXPECT_EQ(a.request, ClientType::kSubscribe);
  EXPECT_EQ(a.result.dump(), R"({"every":4,"fps":50.0,"fields":["f0_hz"],"settled":true})");
}

}  // namespace
}  // namespace pitchwire::protocol
