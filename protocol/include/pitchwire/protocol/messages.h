// messages.h: the typed messages of protocol v1 (JSON text over one WebSocket, subprotocol
// `pitchwire.v1`), their wire names, the frame-field set and the frame-rate arithmetic.
// docs/protocol.md is the reference; protocol/schema/ and protocol/asyncapi.yaml describe the same wire.
//
// Thread contract: any thread; no shared state. Everything here is a value type or a pure function.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <variant>
#include <vector>

#include <nlohmann/json.hpp>

namespace pitchwire::protocol {

// Objects keep the order in which their members were written (mark data, event payloads).
using Json = nlohmann::ordered_json;

inline constexpr int kProtocolVersion = 1;
inline constexpr std::string_view kSubprotocol = "pitchwire.v1";  // Sec-WebSocket-Protocol
inline constexpr std::string_view kWebSocketPath = "/ws";          // the one WebSocket endpoint

// Limits every server enforces on client messages (the daemon may lower max_message_bytes).
inline constexpr std::size_t kDefaultMaxMessageBytes = 16 * 1024;
inline constexpr std::size_t kMaxIdChars = 64;
inline constexpr std::size_t kMaxNameChars = 32;     // band names
inline constexpr std::size_t kMaxPresetChars = 64;   // exercise preset names
inline constexpr std::size_t kMaxLabelChars = 200;   // exercise and marker labels, in code points
inline constexpr std::size_t kMaxMarkDataBytes = 4 * 1024;  // compact JSON text of a marker's data object
inline constexpr int kMaxEvery = 10000;              // largest decimation a subscriber may ask for
inline constexpr double kMaxFps = 1000.0;            // highest frame rate a subscriber may ask for

// ---- names on the wire -------------------------------------------------------------------------------

enum class ServerType : std::uint8_t { kHello, kFrame, kSettled, kStats, kEvent, kError, kPong, kAck };
enum class ClientType : std::uint8_t {
  kSubscribe, kSetBand, kClearBand, kStartExercise, kEndExercise, kMark, kPing, kSetReference
};
enum class Role : std::uint8_t { kObserver, kLab, kSupervisor };
enum class EventKind : std::uint8_t {
  kOverflow, kDeviceLost, kDeviceBack, kBandChanged, kBandCrossing,
  kExerciseStarted, kExerciseEnded, kMarker, kDroppedFrames, kRecordingProblem, kReferenceChanged, kDoseLimit
};
enum class BandPosition : std::uint8_t { kBelow, kInside, kAbove, kUnvoiced };

// Stable error codes. The first group is what decode_request() returns; the second is for the server's
// own answers (roles, limits, state).
enum class ErrorCode : std::uint8_t {
  kBadJson, kNotAnObject, kUnknownType, kUnknownField, kMissingField, kWrongType, kOutOfRange,
  kTooLarge, kBadBand, kBadNote,
  kForbidden, kRateLimited, kUnknownBand, kUnknownPreset, kNoExercise, kExerciseRunning, kInternal
};

inline constexpr std::array<std::string_view, 8> kServerTypeNames = {
    "hello", "frame", "settled", "stats", "event", "error", "pong", "ack"};
inline constexpr std::array<std::string_view, 8> kClientTypeNames = {
    "subscribe", "set_band", "clear_band", "start_exercise", "end_exercise", "mark", "ping", "set_reference"};
inline constexpr std::array<std::string_view, 3> kRoleNames = {"observer", "lab", "supervisor"};
inline constexpr std::array<std::string_view, 12> kEventKindNames = {
    "overflow", "device_lost", "device_back", "band_changed", "band_crossing",
    "exercise_started", "exercise_ended", "marker", "dropped_frames", "recording_problem", "reference_changed",
    "dose_limit"};
inline constexpr std::array<std::string_view, 4> kBandPositionNames = {"below", "inside", "above", "unvoiced"};
inline constexpr std::array<std::string_view, 17> kErrorCodeNames = {
    "bad_json", "not_an_object", "unknown_type", "unknown_field", "missing_field", "wrong_type",
    "out_of_range", "too_large", "bad_band", "bad_note",
    "forbidden", "rate_limited", "unknown_band", "unknown_preset", "no_exercise", "exercise_running",
    "internal"};

[[nodiscard]] std::string_view name(ServerType t);
[[nodiscard]] std::string_view name(ClientType t);
[[nodiscard]] std::string_view name(Role r);
[[nodiscard]] std::string_view name(EventKind k);
[[nodiscard]] std::string_view name(BandPosition p);
[[nodiscard]] std::string_view name(ErrorCode c);

// ---- frame fields and rates ----------------------------------------------------------------------------

// The optional members of a `frame` message (index and time_s are always sent).
enum class FrameField : std::uint8_t { kF0Hz, kVoicing, kConfidence, kLevelDbfs };
inline constexpr std::array<std::string_view, 4> kFrameFieldNames = {"f0_hz", "voicing", "confidence", "level_dbfs"};

// A subset of the frame fields (default: all). bits() is 0..15: a publisher can keep one encoded frame per
// distinct set.
class FieldSet {
 public:
  constexpr FieldSet() = default;
  [[nodiscard]] static constexpr FieldSet all() { return FieldSet(0x0F); }
  [[nodiscard]] static constexpr FieldSet none() { return FieldSet(0); }
  [[nodiscard]] constexpr FieldSet with(FrameField f) const {
    return FieldSet(static_cast<std::uint8_t>(bits_ | bit(f)));
  }
  [[nodiscard]] constexpr bool has(FrameField f) const { return (bits_ & bit(f)) != 0; }
  [[nodiscard]] constexpr std::uint8_t bits() const { return bits_; }
  friend constexpr bool operator==(FieldSet, FieldSet) = default;

 private:
  constexpr explicit FieldSet(std::uint8_t bits) : bits_(bits) {}
  static constexpr std::uint8_t bit(FrameField f) {
    return static_cast<std::uint8_t>(1u << static_cast<unsigned>(f));
  }
  std::uint8_t bits_ = 0x0F;
};

// How often a subscriber gets frames: every hop, every n-th hop, or at most `fps` frames per second.
struct Rate {
  enum class Kind : std::uint8_t { kHop, kEvery, kFps };
  Kind kind = Kind::kHop;
  int every = 1;     // kEvery: 1..kMaxEvery
  double fps = 0.0;  // kFps: (0, kMaxFps]
  friend bool operator==(const Rate&, const Rate&) = default;
};

// The decimation n for a rate at a hop length: a subscriber gets the frames (and settled frames) whose
// index is a multiple of n, so subscribers with the same n see the same frames. For kFps, n is the
// smallest integer with hop_rate / n <= fps (never more frames than asked, always at least one per n hops).
[[nodiscard]] int decimation(const Rate& rate, double hop_ms);
[[nodiscard]] constexpr bool passes(std::int64_t index, int decimation) {
  return decimation <= 1 || index % decimation == 0;
}

// ---- values shared by several messages -------------------------------------------------------------------

struct Band {
  std::string name;
  double low_hz = 0.0;
  double high_hz = 0.0;
  friend bool operator==(const Band&, const Band&) = default;
};

struct Exercise {
  std::string preset;
  std::string label;
  double started_s = 0.0;  // audio clock
};

// ---- client -> server ------------------------------------------------------------------------------------
// Every request has an id (1..kMaxIdChars characters), echoed in its ack, pong or error.

struct Subscribe {
  std::string id;
  Rate rate;
  FieldSet fields = FieldSet::all();
  bool settled = false;  // also send `settled` corrections
  friend bool operator==(const Subscribe&, const Subscribe&) = default;
};

struct SetBand {  // limits already converted to Hz and checked against the search range
  std::string id;
  Band band;
  friend bool operator==(const SetBand&, const SetBand&) = default;
};

struct ClearBand {
  std::string id;
  std::string name;
  friend bool operator==(const ClearBand&, const ClearBand&) = default;
};

struct StartExercise {
  std::string id;
  std::string preset;
  std::string label;  // may be empty
  friend bool operator==(const StartExercise&, const StartExercise&) = default;
};

struct EndExercise {
  std::string id;
  friend bool operator==(const EndExercise&, const EndExercise&) = default;
};

struct Mark {
  std::string id;
  std::string label;
  Json data;  // an object, or null when the request had none
  friend bool operator==(const Mark&, const Mark&) = default;
};

struct Ping {
  std::string id;
  friend bool operator==(const Ping&, const Ping&) = default;
};

struct SetReference {  // converted to Hz (semitones re the current reference) and checked against the range
  std::string id;
  double reference_hz = 0.0;
  friend bool operator==(const SetReference&, const SetReference&) = default;
};

using Request = std::variant<Subscribe, SetBand, ClearBand, StartExercise, EndExercise, Mark, Ping, SetReference>;

[[nodiscard]] ClientType type_of(const Request& request);
[[nodiscard]] const std::string& id_of(const Request& request);

// ---- server -> client ------------------------------------------------------------------------------------
// `frame` and `settled` are encoded straight from dsp::LiveFrame and dsp::SettledFrame (encode.h).

struct AudioFormat {
  double sample_rate_hz = 0.0;
  int channel = 0;  // 1-based input channel analysed; 0 = the mixdown of all channels
};

struct Hello {
  std::string server_version;
  AudioFormat audio;
  double hop_ms = 5.0;
  double settle_ms = 60.0;
  double reference_hz = 100.0;  // semitones are 12*log2(f/reference_hz)
  double f0_min_hz = 50.0;
  double f0_max_hz = 1400.0;
  Role role = Role::kObserver;
  std::vector<Band> bands;
  std::optional<Exercise> exercise;  // the one running, if any
  struct Preset {
    std::string name, label;
  };
  std::vector<Preset> presets;       // the exercise presets start_exercise takes, in the file's order
  std::optional<double> spl_offset_db;  // level calibration (dB SPL = dBFS + offset); empty: none
  std::size_t max_message_bytes = kDefaultMaxMessageBytes;
};

// Periodic statistics over a sliding window. A first set of fields; later work adds more.
// Time inside one target band over a statistics window, and the band's held state at its end.
struct BandShare {
  std::string name;
  std::optional<double> inside_fraction;  // voiced frames inside / voiced frames; empty with none voiced
  BandPosition state = BandPosition::kUnvoiced;  // held state (with hysteresis) at the window's end
  friend bool operator==(const BandShare&, const BandShare&) = default;
};

struct Stats {
  double time_s = 0.0;    // audio clock at the end of the window
  double window_s = 0.0;
  double voiced_fraction = 0.0;
  std::optional<double> f0_p5_hz;   // empty when the window held no voiced frame
  std::optional<double> f0_p50_hz;
  std::optional<double> f0_p95_hz;
  std::optional<double> f0_sd_st;   // SD of F0 in semitones
  std::optional<double> f0_min_hz;  // lowest and highest voiced F0 of the window
  std::optional<double> f0_max_hz;
  std::optional<double> f0_range_st;      // p5-p95 range in semitones
  std::optional<double> reference_hz;     // of the semitone values below (empty with no voiced frame)
  std::optional<double> f0_min_st, f0_p5_st, f0_p50_st, f0_p95_st, f0_max_st;  // 12 log2(f / reference_hz)
  std::optional<double> level_mean_dbfs;  // mean power of the window's frames, dBFS; empty when all silent
  std::optional<double> level_max_dbfs;   // loudest frame, dBFS
  std::optional<double> level_mean_db_spl;  // the same + spl_offset_db; empty when not calibrated
  std::optional<double> level_max_db_spl;
  double session_voiced_s = 0.0;    // vocal dose since the run started: voiced settled time (time dose)
  double session_cycle_dose = 0.0;  // and the sum of F0 x hop over voiced settled frames (cycle dose)
  std::vector<BandShare> bands;     // one per active band, in the order they were set
};

struct Event {
  EventKind kind = EventKind::kMarker;
  double time_s = 0.0;              // audio clock
  Json payload = Json::object();    // members depend on kind (docs/protocol.md, schema/event.json)
  std::optional<Role> by;           // the role of the connection whose request caused it; empty: the daemon
};

// Events with the payload each kind carries. Use these rather than filling Event by hand.
[[nodiscard]] Event overflow_event(double time_s, std::int64_t samples_lost);
[[nodiscard]] Event device_lost_event(double time_s, std::string_view device, std::string_view reason);
[[nodiscard]] Event device_back_event(double time_s, std::string_view device);
[[nodiscard]] Event band_changed_event(double time_s, std::string_view name, const std::vector<Band>& bands);
// time_s: when the change was confirmed; since_s: the first frame of the stretch that made it.
[[nodiscard]] Event band_crossing_event(double time_s, std::string_view name, BandPosition from, BandPosition to,
                                        double since_s);
[[nodiscard]] Event exercise_started_event(double time_s, const Exercise& exercise);
[[nodiscard]] Event exercise_ended_event(double time_s, const Exercise& exercise, Json summary);
[[nodiscard]] Event marker_event(double time_s, const Mark& mark);
[[nodiscard]] Event dropped_frames_event(double time_s, std::int64_t count);
// The reference pitch (semitone limits and presets' semitone bands are relative to it) is now reference_hz.
[[nodiscard]] Event reference_changed_event(double time_s, double reference_hz);
// The session record cannot be written (or can again: resolved = true); the live stream goes on.
[[nodiscard]] Event recording_problem_event(double time_s, std::string_view message, bool resolved);
// A vocal dose limit of the run has been passed: measure "voiced_s" or "cycle_dose", the limit, the value.
[[nodiscard]] Event dose_limit_event(double time_s, std::string_view measure, double limit, double value);

// An error: what decode_request() returns for a bad request, and the `error` message sent for it.
struct Error {
  ErrorCode code = ErrorCode::kInternal;
  std::string message;  // one line naming the field, the value (abbreviated) and what is allowed
  std::string id;       // the request's id when it could be read, else empty (then not sent)
};

struct Pong {
  std::string id;
  double time_s = 0.0;  // audio clock when the ping was answered
};

struct Ack {
  std::string id;
  ClientType request = ClientType::kPing;
  Json result = Json::object();  // sent only when not empty
};

// The ack for a subscription: the decimation and frame rate it will get, its fields and settled flag.
[[nodiscard]] Ack subscribe_ack(const Subscribe& request, double hop_ms);

}  // namespace pitchwire::protocol
