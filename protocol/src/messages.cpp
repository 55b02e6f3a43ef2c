// messages.cpp: wire names, rate arithmetic and the payloads of events and acks (see messages.h).
//
// Thread contract: any thread; no shared state.
#include "pitchwire/protocol/messages.h"

#include <algorithm>
#include <cmath>
#include <type_traits>

namespace pitchwire::protocol {
namespace {

template <std::size_t N, typename E>
std::string_view lookup(const std::array<std::string_view, N>& names, E value) {
  const auto i = static_cast<std::size_t>(value);
  return i < N ? names[i] : std::string_view("?");
}

Json band_json(const Band& band) {
  return Json{{"name", band.name}, {"low_hz", band.low_hz}, {"high_hz", band.high_hz}};
}

Event event(EventKind kind, double time_s, Json payload) { return Event{kind, time_s, std::move(payload), std::nullopt}; }

}  // namespace

std::string_view name(ServerType t) { return lookup(kServerTypeNames, t); }
std::string_view name(ClientType t) { return lookup(kClientTypeNames, t); }
std::string_view name(Role r) { return lookup(kRoleNames, r); }
std::string_view name(EventKind k) { return lookup(kEventKindNames, k); }
std::string_view name(BandPosition p) { return lookup(kBandPositionNames, p); }
std::string_view name(ErrorCode c) { return lookup(kErrorCodeNames, c); }

int decimation(const Rate& rate, double hop_ms) {
  switch (rate.kind) {
    case Rate::Kind::kHop:
      return 1;
    case Rate::Kind::kEvery:
      return std::max(rate.every, 1);
    case Rate::Kind::kFps: {
      if (!(rate.fps > 0.0) || !(hop_ms > 0.0)) return 1;
      const double hop_rate = 1000.0 / hop_ms;
      // Smallest n with hop_rate / n <= fps; the tolerance keeps exact ratios (200 / 50) at 4, not 5.
      const double n = std::ceil(hop_rate / rate.fps - 1e-9);
      return static_cast<int>(std::clamp(n, 1.0, static_cast<double>(kMaxEvery)));
    }
  }
  return 1;
}

// The alternatives of Request are in the order of ClientType.
static_assert(std::is_same_v<std::variant_alternative_t<static_cast<std::size_t>(ClientType::kSetBand), Request>, SetBand>);
static_assert(std::is_same_v<std::variant_alternative_t<static_cast<std::size_t>(ClientType::kPing), Request>, Ping>);
static_assert(std::variant_size_v<Request> == kClientTypeNames.size());

ClientType type_of(const Request& request) { return static_cast<ClientType>(request.index()); }

const std::string& id_of(const Request& request) {
  return std::visit([](const auto& r) -> const std::string& { return r.id; }, request);
}

Event overflow_event(double time_s, std::int64_t samples_lost) {
  return event(EventKind::kOverflow, time_s, Json{{"samples_lost", samples_lost}});
}

Event device_lost_event(double time_s, std::string_view device, std::string_view reason) {
  return event(EventKind::kDeviceLost, time_s, Json{{"device", device}, {"reason", reason}});
}

Event device_back_event(double time_s, std::string_view device) {
  return event(EventKind::kDeviceBack, time_s, Json{{"device", device}});
}

Event band_changed_event(double time_s, std::string_view name, const std::vector<Band>& bands) {
  Json list = Json::array();
  for (const auto& b : bands) list.push_back(band_json(b));
  return event(EventKind::kBandChanged, time_s, Json{{"name", name}, {"bands", std::move(list)}});
}

Event band_crossing_event(double time_s, std::string_view name, BandPosition from, BandPosition to,
                          double since_s) {
  return event(EventKind::kBandCrossing, time_s,
               Json{{"name", name}, {"from", protocol::name(from)}, {"to", protocol::name(to)}, {"since_s", since_s}});
}

Event exercise_started_event(double time_s, const Exercise& exercise) {
  return event(EventKind::kExerciseStarted, time_s,
               Json{{"preset", exercise.preset}, {"label", exercise.label}, {"started_s", exercise.started_s}});
}

Event exercise_ended_event(double time_s, const Exercise& exercise, Json summary) {
  if (!summary.is_object()) summary = Json::object();
  return event(EventKind::kExerciseEnded, time_s,
               Json{{"preset", exercise.preset},
                    {"label", exercise.label},
                    {"started_s", exercise.started_s},
                    {"summary", std::move(summary)}});
}

Event marker_event(double time_s, const Mark& mark) {
  Json payload{{"id", mark.id}, {"label", mark.label}};
  if (mark.data.is_object()) payload["data"] = mark.data;
  return event(EventKind::kMarker, time_s, std::move(payload));
}

Event dropped_frames_event(double time_s, std::int64_t count) {
  return event(EventKind::kDroppedFrames, time_s, Json{{"count", count}});
}

Event reference_changed_event(double time_s, double reference_hz) {
  return event(EventKind::kReferenceChanged, time_s, Json{{"reference_hz", reference_hz}});
}

Event recording_problem_event(double time_s, std::string_view message, bool resolved) {
  return event(EventKind::kRecordingProblem, time_s, Json{{"message", message}, {"resolved", resolved}});
}

Event dose_limit_event(double time_s, std::string_view measure, double limit, double value) {
  return event(EventKind::kDoseLimit, time_s, Json{{"measure", measure}, {"limit", limit}, {"value", value}});
}

Ack subscribe_ack(const Subscribe& request, double hop_ms) {
  const int n = decimation(request.rate, hop_ms);
  Json fields = Json::array();
  for (std::size_t i = 0; i < kFrameFieldNames.size(); ++i) {
    if (request.fields.has(static_cast<FrameField>(i))) fields.push_back(kFrameFieldNames[i]);
  }
  return Ack{request.id, ClientType::kSubscribe,
             Json{{"every", n},
                  {"fps", hop_ms > 0.0 ? 1000.0 / hop_ms / n : 0.0},
                  {"fields", std::move(fields)},
                  {"settled", request.settled}}};
}

}  // namespace pitchwire::protocol
