// protocol_samples: prints, as JSON lines, the protocol's names and constants, a sample of every server
// message (every event kind, every error the decoder gives for the bad samples below) and the client
// samples below with what the decoder made of them. check_schemas.py validates all of it against
// protocol/schema/ and checks protocol/asyncapi.yaml and docs/protocol.md against the names.
//
// Thread contract: a single-threaded program; no shared state.
#include <iostream>
#include <string>
#include <vector>

#include "pitchwire/protocol/decode.h"
#include "pitchwire/protocol/encode.h"

namespace pw = pitchwire::protocol;
using pw::Json;

namespace {

template <std::size_t N>
Json names(const std::array<std::string_view, N>& list) {
  Json out = Json::array();
  for (const auto n : list) out.push_back(n);
  return out;
}

std::uint64_t g_seq = 0;

void server(const pw::Encoded& e) {
  std::cout << Json{{"kind", "server"}, {"type", pw::name(e.type)}, {"text", pw::text(e, ++g_seq)}}.dump() << '\n';
}

// A client sample. schema_rejects: whether the JSON Schemas alone can tell that the sample is bad
// (they cannot compare low with high, know the search range, or measure serialized sizes).
struct ClientSample {
  std::string text;
  bool schema_rejects = true;
};

void client(const ClientSample& sample) {
  const pw::Decoded d = pw::decode_request(sample.text);
  Json line{{"kind", "client"}, {"text", sample.text}};
  if (const auto* request = std::get_if<pw::Request>(&d)) {
    line["accepted"] = true;
    line["type"] = pw::name(pw::type_of(*request));
    line["canonical"] = pw::encode_request(*request);
    std::cout << line.dump(-1, ' ', false, Json::error_handler_t::replace) << '\n';
    if (const auto* s = std::get_if<pw::Subscribe>(request)) server(pw::encode(pw::subscribe_ack(*s, 5.0)));
    if (const auto* m = std::get_if<pw::Mark>(request)) server(pw::encode(pw::marker_event(3.25, *m)));
    return;
  }
  const auto& error = std::get<pw::Error>(d);
  line["accepted"] = false;
  line["code"] = pw::name(error.code);
  line["schema_rejects"] = sample.schema_rejects;
  std::cout << line.dump(-1, ' ', false, Json::error_handler_t::replace) << '\n';
  server(pw::encode(error));
}

}  // namespace

int main() {
  std::cout << Json{{"kind", "constants"},
                    {"protocol", pw::kProtocolVersion},
                    {"subprotocol", pw::kSubprotocol},
                    {"path", pw::kWebSocketPath},
                    {"server_types", names(pw::kServerTypeNames)},
                    {"client_types", names(pw::kClientTypeNames)},
                    {"error_codes", names(pw::kErrorCodeNames)},
                    {"event_kinds", names(pw::kEventKindNames)},
                    {"frame_fields", names(pw::kFrameFieldNames)},
                    {"roles", names(pw::kRoleNames)},
                    {"band_positions", names(pw::kBandPositionNames)}}
                   .dump()
            << '\n';

  pw::Hello hello;
  hello.server_version = "0.1.0";
  hello.audio = {48000.0, 0};
  hello.bands = {{"target", 165.0, 220.0}, {"upper", 261.6255653005986, 329.6275569128699}};
  server(pw::encode(hello));
  hello.audio.channel = 2;
  hello.role = pw::Role::kSupervisor;
  hello.bands.clear();
  hello.exercise = pw::Exercise{"glide", "Glide, first try", 12.5};
  hello.spl_offset_db = 94.5;
  hello.presets = {{"sustained_vowel", "Sustained vowel"}, {"pitch_glide", "Pitch glide"}};
  server(pw::encode(hello));

  pitchwire::dsp::LiveFrame live;
  live.index = 1234;
  live.time_s = 6.17;
  live.f0_hz = 220.125f;
  live.voicing = 0.987f;
  live.confidence = 0.912f;
  live.level_dbfs = -23.45f;
  server(pw::encode_frame(live, pw::FieldSet::all()));
  server(pw::encode_frame(live, pw::FieldSet::none()));
  server(pw::encode_frame(live, pw::FieldSet::none().with(pw::FrameField::kVoicing)));
  live.f0_hz.reset();
  live.confidence = 0.0f;
  server(pw::encode_frame(live, pw::FieldSet::all()));

  pitchwire::dsp::SettledFrame settled;
  settled.index = 1222;
  settled.time_s = 6.11;
  settled.f0_hz = 219.5f;
  server(pw::encode_settled(settled));
  settled.f0_hz.reset();
  server(pw::encode_settled(settled));

  pw::Stats stats;
  stats.time_s = 30.0;
  stats.window_s = 10.0;
  server(pw::encode(stats));
  stats.time_s = 40.0;
  stats.voiced_fraction = 0.62;
  stats.f0_p5_hz = 151.0;
  stats.f0_p50_hz = 182.5;
  stats.f0_p95_hz = 240.0;
  stats.f0_sd_st = 1.8;
  stats.f0_min_hz = 140.2;
  stats.f0_max_hz = 262.9;
  stats.f0_range_st = 8.018;
  stats.reference_hz = 100.0;
  stats.f0_min_st = 5.85;
  stats.f0_p5_st = 7.135;
  stats.f0_p50_st = 10.415;
  stats.f0_p95_st = 15.156;
  stats.f0_max_st = 16.734;
  stats.level_mean_dbfs = -23.41;
  stats.level_max_dbfs = -12.07;
  server(pw::encode(stats));
  stats.level_mean_db_spl = 71.09;  // calibrated: spl_offset_db 94.5
  stats.level_max_db_spl = 82.43;
  stats.session_voiced_s = 412.35;
  stats.session_cycle_dose = 78211.4;
  stats.bands = {{"target", 0.84, pw::BandPosition::kInside}, {"ceiling", std::nullopt, pw::BandPosition::kUnvoiced}};
  server(pw::encode(stats));

  const pw::Exercise exercise{"sustained_a", "", 20.0};
  server(pw::encode(pw::overflow_event(1.0, 512)));
  server(pw::encode(pw::device_lost_event(2.0, "USB Audio", "the device was unplugged")));
  server(pw::encode(pw::device_back_event(9.0, "USB Audio")));
  server(pw::encode(pw::band_changed_event(10.0, "target", {{"target", 165.0, 220.0}})));
  server(pw::encode(pw::band_changed_event(11.0, "target", {})));
  {
    pw::Event by_supervisor = pw::band_changed_event(11.5, "target", {{"target", 165.0, 220.0}});
    by_supervisor.by = pw::Role::kSupervisor;
    server(pw::encode(by_supervisor));
  }
  server(pw::encode(pw::band_crossing_event(12.0, "target", pw::BandPosition::kUnvoiced, pw::BandPosition::kAbove, 11.85)));
  server(pw::encode(pw::exercise_started_event(20.0, exercise)));
  server(pw::encode(pw::exercise_ended_event(
      35.0, exercise,
      Json{{"duration_s", 15.0}, {"settled_s", 15.0}, {"voiced_s", 11.2}, {"voiced_fraction", 0.747}, {"cycle_dose", 2284.6},
           {"f0_p5_hz", 196.2}, {"f0_p50_hz", 203.9}, {"f0_p95_hz", 211.0}, {"f0_min_hz", 188.4}, {"f0_max_hz", 216.3},
           {"reference_hz", 195.998}, {"f0_min_st", -0.684}, {"f0_p5_st", 0.018}, {"f0_p50_st", 0.684},
           {"f0_p95_st", 1.277}, {"f0_max_st", 1.706}, {"f0_range_st", 1.259}, {"f0_sd_st", 0.38},
           {"bands", Json::array({Json{{"name", "target"}, {"inside_fraction", 0.912}}})},
           {"measures", Json::array({"f0_sd_st", "voiced_s", "inside_fraction"})}})));
  server(pw::encode(pw::dropped_frames_event(36.0, 17)));
  {
    pw::Event reference = pw::reference_changed_event(38.0, 195.998);
    reference.by = pw::Role::kSupervisor;
    server(pw::encode(reference));
  }
  server(pw::encode(pw::recording_problem_event(40.0, "session record: cannot write /home/coach/.local/state/pitchwire/sessions/20261202T101500Z/session.jsonl: No space left on device", false)));
  server(pw::encode(pw::recording_problem_event(52.0, "session record: writing again", true)));
  server(pw::encode(pw::dose_limit_event(61.2, "voiced_s", 600.0, 600.005)));
  server(pw::encode(pw::dose_limit_event(75.0, "cycle_dose", 120000.0, 120000.8)));
  server(pw::encode(pw::Error{pw::ErrorCode::kForbidden, "set_band: needs the supervisor role", "b1"}));
  server(pw::encode(pw::Pong{"p1", 41.005}));
  server(pw::encode(pw::Ack{"x1", pw::ClientType::kStartExercise, Json::object()}));

  const std::vector<ClientSample> samples = {
      {R"({"type":"subscribe","id":"s1"})"},
      {R"({"type":"subscribe","id":"s2","rate":"hop","fields":[],"settled":true})"},
      {R"({"type":"subscribe","id":"s3","rate":{"every":4},"fields":["f0_hz","level_dbfs"]})"},
      {R"({"type":"subscribe","id":"s4","rate":{"fps":30.5}})"},
      {R"({"type":"set_band","id":"b1","name":"target","low":165,"high":220.5})"},
      {R"({"type":"set_band","id":"b2","name":"upper.range-2","low":"A3","high":"C#4"})"},
      {R"({"type":"set_band","id":"b3","name":"t","low":"-3st","high":" +4.5 st"})"},
      {R"({"type":"clear_band","id":"c1","name":"target"})"},
      {R"({"type":"start_exercise","id":"x1","preset":"glide"})"},
      {R"({"type":"start_exercise","id":"x2","preset":"sustained_a","label":"Vowel /a/, comfortable pitch"})"},
      {R"({"type":"end_exercise","id":"x3"})"},
      {R"({"type":"mark","id":"m1","label":"trial 12 onset"})"},
      {R"({"type":"mark","id":"m2","label":"stimulus ✓","data":{"trial":12,"condition":"loud","t":[0.5,1]}})"},
      {R"({"type":"ping","id":"p1"})"},
      {R"({"type":"set_reference","id":"r1","reference":"G3"})"},
      {R"({"type":"set_reference","id":"r2","reference":180.5})"},
      // Bad samples: one or more for every code the decoder gives.
      {R"({"type":"ping","id":"p")"},
      {R"([1,2])"},
      {R"({"type":"dance","id":"1"})"},
      {R"({"type":"ping","id":"1","extra":true})"},
      {R"({"type":"subscribe","id":"1","rate":{"every":2,"phase":1}})"},
      {R"({"type":"ping"})"},
      {R"({"type":"set_band","id":"1","name":"t","low":165})"},
      {R"({"type":"ping","id":12})"},
      {R"({"type":"subscribe","id":"1","settled":"yes"})"},
      {R"({"type":"subscribe","id":"1","rate":{"every":2.5}})"},
      {R"({"type":"mark","id":"1","label":"x","data":[1]})"},
      {R"({"type":"subscribe","id":"1","rate":{"every":0}})"},
      {R"({"type":"subscribe","id":"1","rate":{"every":10001}})"},
      {R"({"type":"subscribe","id":"1","rate":{"fps":0}})"},
      {R"({"type":"subscribe","id":"1","rate":"fast"})"},
      {R"({"type":"ping","id":")" + std::string(65, 'i') + "\"}"},
      {R"({"type":"ping","id":""})"},
      {R"({"type":"start_exercise","id":"1","preset":"my preset"})"},
      {R"({"type":"start_exercise","id":"1","preset":"p","label":")" + std::string(201, 'x') + "\"}"},
      {R"({"type":"set_band","id":"1","name":")" + std::string(33, 'n') + R"(","low":100,"high":200})"},
      {R"({"type":"subscribe","id":"1","rate":{"fps":1001}})"},
      {R"({"type":"subscribe","id":"1","rate":{}})"},
      {R"({"type":"subscribe","id":"1","fields":["pitch"]})"},
      {R"({"type":"clear_band","id":"1","name":"my band"})"},
      {R"({"type":"clear_band","id":"1","name":"band\n"})"},
      {R"({"type":"mark","id":"1","label":"line\n"})"},
      {R"({"type":"mark","id":"1","label":""})"},
      {R"({"type":"mark","id":"1","label":")" + std::string(201, 'x') + "\"}"},
      {R"({"type":"mark","id":"1","label":"x","data":{"k":")" + std::string(4100, 'a') + "\"}}", false},
      {R"({"type":"set_band","id":"1","name":"t","low":220,"high":165})", false},
      {R"({"type":"set_band","id":"1","name":"t","low":"A0","high":200})", false},
      {R"({"type":"set_band","id":"1","name":"t","low":"H3","high":200})"},
      {R"({"type":"set_band","id":"1","name":"t","low":150,"high":"3 semitones"})"},
      {R"({"type":"set_band","id":"1","name":"t","low":"3st\n","high":400})"},
  };
  for (const auto& s : samples) client(s);
  client({std::string(pw::kDefaultMaxMessageBytes + 1, ' '), false});
  return 0;
}
