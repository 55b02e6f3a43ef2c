// server.cpp: the HTTP + WebSocket server and publisher of pitchwired (see server.h). The only
// translation unit that includes Boost.Beast.
//
// Thread contract:
//   analysis thread   Server::on_live/on_settled/on_stats/on_event/on_end: encode once, post one job.
//   monitor thread    Server::on_device_lost/on_device_back: build the event, post one job.
//   network thread    everything else. One thread runs the io_context, so it is the implicit strand of
//                     every connection (handlers of an io_context run by one thread never run
//                     concurrently): the fan-out hands a frame to each connection by a direct call rather
//                     than by posting a handler per connection, which is what lets one thread serve
//                     hundreds of subscribers at 200 frames per second. Nothing on that thread blocks:
//                     every socket operation is asynchronous and every connection's queue is bounded.
//                     The shared state (bands, exercise) is guarded by a small mutex, never held
//                     across I/O, because other threads read it for exercise summaries.
#include "pitchwire/daemon/server.h"
#include "pitchwire/daemon/exercise_summary.h"
#include "pitchwire/daemon/recorder.h"

#include <algorithm>
#include <array>
#include <atomic>
#include <chrono>
#include <deque>
#include <future>
#include <map>
#include <mutex>
#include <optional>
#include <thread>
#include <unordered_set>
#include <utility>  // before Boost.Asio 1.74, whose awaitable.hpp uses std::exchange without it
#include <vector>

#include <pthread.h>

#include <boost/asio.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <boost/beast/websocket.hpp>
#include <spdlog/fmt/fmt.h>
#include <spdlog/spdlog.h>

#include "pitchwire/protocol/encode.h"

namespace pitchwire::daemon {

namespace beast = boost::beast;
namespace http = beast::http;
namespace websocket = beast::websocket;
namespace net = boost::asio;
using tcp = net::ip::tcp;
using Clock = std::chrono::steady_clock;

namespace {

constexpr auto kHttpTimeout = std::chrono::seconds(15);
// WebSocket keep-alive: a ping after half of this without traffic from the peer, closed after all of it.
constexpr auto kIdleTimeout = std::chrono::seconds(30);
constexpr auto kHandshakeTimeout = std::chrono::seconds(10);
// Replies and events are never dropped; a connection that lets this many of them pile up is closed.
constexpr std::size_t kMaxQueuedReplies = 512;
// How long a connection may take to complete its closing handshake before its socket is shut.
constexpr auto kCloseGrace = std::chrono::milliseconds(500);
// A client that keeps sending after this many refused requests in a row is closed (1008).
constexpr int kMaxRefusedInARow = 100;
constexpr std::size_t kMaxBands = 16;
constexpr std::chrono::milliseconds kAcceptRetry{200};
constexpr std::size_t kOversizeFactor = 4;
// Kernel send buffer per WebSocket (Linux doubles it): about 1 s of frames at full rate with every field.
constexpr int kSocketSendBufferBytes = 32 * 1024;
constexpr std::size_t kMaxHttpHeaderBytes = 8 * 1024;
// A second Sec-WebSocket-Protocol entry may carry the token: "pitchwire.token.<hex>".
constexpr std::string_view kTokenProtocolPrefix = "pitchwire.token.";
// Token guessing: after this many unknown tokens from one address within the window, further unknown tokens
// from it are refused with HTTP 429 (not 403) until the window that began with the first of them has passed;
// a valid token is always accepted, so a stale client cannot lock the supervisor out. Tokens have 128 bits,
// so this is about noise in the logs and wasted work, not odds.
constexpr int kTokenFailuresAllowed = 5;
constexpr auto kTokenFailureWindow = std::chrono::seconds(60);
constexpr std::size_t kTokenFailureAddresses = 1024;  // addresses remembered (the oldest is forgotten)

protocol::FieldSet field_set_from_bits(unsigned bits) {
  protocol::FieldSet set = protocol::FieldSet::none();
  for (unsigned f = 0; f < protocol::kFrameFieldNames.size(); ++f) {
    if (bits & (1u << f)) set = set.with(static_cast<protocol::FrameField>(f));
  }
  return set;
}

// Frames of one hop, encoded once per field set in use (index = FieldSet::bits()).
struct FrameBatch {
  dsp::LiveFrame frame;
  std::array<std::shared_ptr<const std::string>, 16> bodies;
};

struct SettledBatch {
  std::int64_t index = 0;
  std::string body;
};

// Any other server message, encoded once and shared by every connection it goes to.
struct SharedMessage {
  protocol::Encoded encoded;
};

std::string lower(std::string_view s) {
  std::string out(s);
  std::transform(out.begin(), out.end(), out.begin(), [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  return out;
}

std::string_view trim(std::string_view s) {
  while (!s.empty() && (s.front() == ' ' || s.front() == '\t')) s.remove_prefix(1);
  while (!s.empty() && (s.back() == ' ' || s.back() == '\t')) s.remove_suffix(1);
  return s;
}

// The value of `key` in a query string ("a=1&token=abc"), without percent-decoding (tokens are hex).
std::string query_value(std::string_view target, std::string_view key) {
  const auto q = target.find('?');
  if (q == std::string_view::npos) return {};
  std::string_view rest = target.substr(q + 1);
  while (!rest.empty()) {
    const auto amp = rest.find('&');
    const std::string_view pair = rest.substr(0, amp);
    const auto eq = pair.find('=');
    if (eq != std::string_view::npos && pair.substr(0, eq) == key) return std::string(pair.substr(eq + 1));
    if (amp == std::string_view::npos) break;
    rest.remove_prefix(amp + 1);
  }
  return {};
}

std::string_view path_of(std::string_view target) { return target.substr(0, target.find('?')); }

const char* mime_type(const std::filesystem::path& path) {
  const std::string ext = lower(path.extension().string());
  if (ext == ".html" || ext == ".htm") return "text/html; charset=utf-8";
  if (ext == ".js" || ext == ".mjs") return "text/javascript; charset=utf-8";
  if (ext == ".css") return "text/css; charset=utf-8";
  if (ext == ".json") return "application/json";
  if (ext == ".svg") return "image/svg+xml";
  if (ext == ".png") return "image/png";
  if (ext == ".ico") return "image/x-icon";
  if (ext == ".woff2") return "font/woff2";
  if (ext == ".txt") return "text/plain; charset=utf-8";
  return "application/octet-stream";
}

// Percent-decodes a URL path. Empty when it holds a malformed escape, an encoded slash or backslash, or
// a NUL: those never name a file of ours, and refusing them closes the usual tricks to leave web_root.
std::optional<std::string> decode_path(std::string_view path) {
  std::string out;
  for (std::size_t i = 0; i < path.size(); ++i) {
    char c = path[i];
    if (c == '%') {
      if (i + 2 >= path.size()) return std::nullopt;
      auto hex = [](char h) -> int {
        if (h >= '0' && h <= '9') return h - '0';
        if (h >= 'a' && h <= 'f') return h - 'a' + 10;
        if (h >= 'A' && h <= 'F') return h - 'A' + 10;
        return -1;
      };
      const int hi = hex(path[i + 1]), lo = hex(path[i + 2]);
      if (hi < 0 || lo < 0) return std::nullopt;
      c = static_cast<char>(hi * 16 + lo);
      if (c == '/' || c == '\\' || c == '\0') return std::nullopt;
      i += 2;
    } else if (c == '\\' || c == '\0') {
      return std::nullopt;
    }
    out.push_back(c);
  }
  return out;
}

}  // namespace

bool tokens_equal(std::string_view presented, std::string_view expected) {
  // Always walk the expected token's length; fold in the length difference.
  unsigned diff = presented.size() == expected.size() ? 0u : 1u;
  for (std::size_t i = 0; i < expected.size(); ++i) {
    const char p = i < presented.size() ? presented[i] : '\0';
    diff |= static_cast<unsigned>(static_cast<unsigned char>(p) ^ static_cast<unsigned char>(expected[i]));
  }
  return diff == 0 && !expected.empty();
}

class WsSession;

struct Server::Impl : std::enable_shared_from_this<Server::Impl> {
  explicit Impl(ServerOptions o) : options(std::move(o)), acceptor(ioc), reference_hz(options.hello.reference_hz) {}

  ServerOptions options;
  net::io_context ioc;
  tcp::acceptor acceptor;
  net::steady_timer accept_timer{ioc};
  std::thread thread;  // the network thread
  std::optional<net::executor_work_guard<net::io_context::executor_type>> work;
  int bound_port = 0;
  std::atomic<bool> stopping{false};
  std::atomic<bool> input_ended{false};
  std::vector<std::string> allowed_hosts;    // "127.0.0.1:7350", "localhost:7350", "[::1]:7350"
  std::vector<std::string> allowed_origins;  // "http://" + each allowed host

  // Connections, for fan-out. Network thread only (session_count is read from any thread).
  std::vector<std::shared_ptr<WsSession>> sessions;
  std::vector<std::shared_ptr<WsSession>> fan_out_scratch;  // reused: no allocation per frame
  std::atomic<std::size_t> session_count{0};
  // Field sets in use by subscriptions: count per FieldSet::bits(); the analysis thread encodes those.
  std::array<std::atomic<int>, 16> field_set_users{};

  // Shared session state: bands and the running exercise.
  std::mutex state_mutex;
  std::vector<protocol::Band> bands;
  std::optional<protocol::Exercise> exercise;
  // The running exercise's measures: fed with every settled frame on the analysis thread while
  // exercise_running, read at its end on the network thread; exercise_bands mirrors `bands` for it.
  // Lock order: state_mutex before exercise_mutex.
  std::mutex exercise_mutex;
  std::optional<ExerciseSummary> exercise_summary;
  std::vector<protocol::Band> exercise_bands;
  std::vector<std::string> exercise_measures;
  std::atomic<bool> exercise_running{false};
  double exercise_from_s = 0.0;  // settled frames from this time on count (they arrive a settle lag late)
  // The reference pitch for semitone limits: set_reference changes it (network thread only).
  double reference_hz = 0.0;
  void mirror_bands(const std::vector<protocol::Band>& now) {
    const std::lock_guard lock(exercise_mutex);
    exercise_bands = now;
  }

  double now_audio() const { return options.audio_clock ? options.audio_clock() : 0.0; }

  void fan_out_frame(const std::shared_ptr<const FrameBatch>& batch);
  void fan_out_settled(const std::shared_ptr<const SettledBatch>& batch);
  void broadcast(const protocol::Encoded& message);  // network thread
  void deliver_all(const std::shared_ptr<const SharedMessage>& shared);
  void post_broadcast(protocol::Encoded message);     // any thread: encoded here, sent by the network thread
  // Any thread: an event for everyone, handed to the session record (on_event_sent) and posted.
  void post_event(const protocol::Event& event) {
    if (options.on_event_sent) options.on_event_sent(event);
    post_broadcast(protocol::encode(event));
  }
  void broadcast_event(const protocol::Event& event) {
    if (options.on_event_sent) options.on_event_sent(event);
    broadcast(protocol::encode(event));
  }
  // Network thread. Ends the running exercise: its exercise_ended event with the summary, to be sent, with
  // `by` the role that ended it (empty: the daemon, at stop); empty when no exercise is running.
  std::optional<protocol::Event> end_exercise(std::optional<protocol::Role> by);
  const std::vector<std::shared_ptr<WsSession>>& snapshot();
  void add_session(const std::shared_ptr<WsSession>& s);
  void remove_session(const WsSession* s);
  void do_accept();
  // Network thread: unknown tokens per remote address (token guessing).
  struct TokenFailures {
    int count = 0;
    Clock::time_point first;  // of the window the count belongs to
  };
  std::map<std::string, TokenFailures> token_failures;
  // Counts an unknown token from `address`; true when the address has had too many within the window.
  bool token_failed(const std::string& address) {
    const auto now = Clock::now();
    auto it = token_failures.find(address);
    if (it == token_failures.end()) {
      if (token_failures.size() >= kTokenFailureAddresses) {
        token_failures.erase(std::min_element(token_failures.begin(), token_failures.end(), [](const auto& a, const auto& b) {
          return a.second.first < b.second.first;
        }));
      }
      it = token_failures.emplace(address, TokenFailures{0, now}).first;
    }
    TokenFailures& f = it->second;
    if (now - f.first > kTokenFailureWindow) f = TokenFailures{0, now};
    return ++f.count > kTokenFailuresAllowed;
  }

  bool host_allowed(std::string_view host) const {
    // With tokens required, a page reached under another name (DNS rebinding) still has no token.
    if (options.require_token) return true;
    const std::string h = lower(host);
    return std::find(allowed_hosts.begin(), allowed_hosts.end(), h) != allowed_hosts.end();
  }
  bool origin_allowed(std::string_view origin, std::string_view host) const {
    const std::string o = lower(origin);
    if (options.require_token) return o == lower("http://" + std::string(host));  // our own page only
    return std::find(allowed_origins.begin(), allowed_origins.end(), o) != allowed_origins.end();
  }
};

// ---- WebSocket connection -----------------------------------------------------------------------------

class WsSession : public std::enable_shared_from_this<WsSession> {
 public:
  WsSession(tcp::socket&& socket, std::shared_ptr<Server::Impl> server, protocol::Role role)
      : ws_(std::move(socket)), server_(std::move(server)), role_(role),
        close_timer_(ws_.get_executor()) {
    tokens_ = server_->options.request_burst;
    last_refill_ = Clock::now();
  }

  ~WsSession() {
    if (subscribed_) server_->field_set_users[fields_.bits()].fetch_sub(1);
  }

  protocol::Role role() const { return role_; }

  // Network thread, right after the HTTP upgrade request was checked.
  void run(http::request<http::string_body> request) {
    websocket::stream_base::timeout timeouts{};
    timeouts.handshake_timeout = kHandshakeTimeout;
    timeouts.idle_timeout = kIdleTimeout;
    timeouts.keep_alive_pings = true;
    ws_.set_option(timeouts);
    ws_.set_option(websocket::stream_base::decorator([](websocket::response_type& res) {
      res.set(http::field::server, "pitchwired/" PITCHWIRE_VERSION);
      res.set(http::field::sec_websocket_protocol, std::string(protocol::kSubprotocol));
    }));
    // Messages up to max_message_bytes are decoded; longer ones up to kOversizeFactor times that are
    // read and answered with a too_large error (docs/protocol.md); beyond that the WebSocket is failed
    // with close code 1009, so that nobody can make the daemon buffer megabytes.
    ws_.read_message_max(server_->options.max_message_bytes * kOversizeFactor);
    ws_.auto_fragment(false);
    // Every message is text; binary frames from the client are refused in on_read.
    ws_.text(true);
    net::dispatch(ws_.get_executor(), [self = shared_from_this(), req = std::move(request)]() mutable {
      self->ws_.async_accept(req, beast::bind_front_handler(&WsSession::on_accept, self));
    });
  }

  // ---- called by the fan-out, on the network thread ----

  void deliver_frame(const std::shared_ptr<const FrameBatch>& batch) {
    if (!subscribed_ || closing_) return;
    if (!protocol::passes(batch->frame.index, decimation_)) return;
    if (!first_frame_index_) first_frame_index_ = batch->frame.index;
    std::shared_ptr<const std::string> body = batch->bodies[fields_.bits()];
    if (!body) {
      // Subscribed between the encoding and now: encode for this connection alone.
      body = std::make_shared<const std::string>(protocol::encode_frame(batch->frame, fields_).body);
    }
    push_frame(protocol::ServerType::kFrame, body, body->data(), body->size());
  }

  void deliver_settled(const std::shared_ptr<const SettledBatch>& batch) {
    if (!subscribed_ || !settled_ || closing_) return;
    if (!protocol::passes(batch->index, decimation_)) return;
    // A correction only for a frame this connection was sent (or would have been, had it not dropped it).
    if (!first_frame_index_ || batch->index < *first_frame_index_) return;
    push_frame(protocol::ServerType::kSettled, batch, batch->body.data(), batch->body.size());
  }

  void deliver(const std::shared_ptr<const SharedMessage>& message) {
    if (closing_) return;
    push_reply(message->encoded.type, message, message->encoded.body);
  }

  // Shuts the socket at once (the server is gone; no closing handshake). Control thread, after the
  // network thread has ended.
  void shut() {
    beast::error_code ignored;
    beast::get_lowest_layer(ws_).close(ignored);
    close_timer_.cancel();
  }

  // Closes with `code` and `reason`. With drain, what is queued is sent first (a daemon that stops or
  // whose input ended); without, it is discarded (a client being thrown out). Either way the socket is
  // shut if the closing handshake has not completed within kCloseGrace.
  void close(websocket::close_code code, std::string reason, bool drain = false) {
    if (closing_) return;
    closing_ = true;
    close_reason_ = websocket::close_reason(code, reason);
    close_timer_.expires_after(kCloseGrace);
    close_timer_.async_wait([self = shared_from_this()](beast::error_code ec) {
      if (!ec) {
        beast::error_code ignored;
        beast::get_lowest_layer(self->ws_).close(ignored);  // the peer did not finish in time
      }
    });
    if (!drain) {
      queue_.clear();  // the message being written, if any, is in_flight_, not in the queue
      queued_frames_ = 0;
    }
    if (!in_flight_ && queue_.empty()) start_close();
  }

 private:
  struct Outgoing {
    Outgoing(protocol::ServerType type, std::uint64_t seq, std::shared_ptr<const void> keep, std::string_view text,
             bool may_drop)
        : head(type, seq), owner(std::move(keep)), body(text), droppable(may_drop) {}
    protocol::MessageHead head;          // `{"type":"...","seq":N`
    std::shared_ptr<const void> owner;   // keeps `body` alive
    std::string_view body;
    bool droppable;
  };

  void on_accept(beast::error_code ec) {
    if (ec) {
      spdlog::debug("websocket handshake failed: {}", ec.message());
      return;
    }
    server_->add_session(shared_from_this());
    protocol::Hello hello = server_->options.hello;
    hello.reference_hz = server_->reference_hz;
    hello.role = role_;
    hello.max_message_bytes = server_->options.max_message_bytes;
    {
      std::lock_guard lock(server_->state_mutex);
      hello.bands = server_->bands;
      hello.exercise = server_->exercise;
    }
    send_own(protocol::encode(hello));
    do_read();
  }

  void do_read() {
    ws_.async_read(read_buffer_, beast::bind_front_handler(&WsSession::on_read, shared_from_this()));
  }

  void on_read(beast::error_code ec, std::size_t) {
    if (ec) {
      if (ec == websocket::error::message_too_big) {
        // Beast has already failed the connection with close code 1009 (message too big).
        spdlog::info("client closed: message larger than {} bytes",
                     server_->options.max_message_bytes * kOversizeFactor);
      } else if (ec != websocket::error::closed && ec != net::error::operation_aborted) {
        spdlog::debug("client read ended: {}", ec.message());
      }
      finish();
      return;
    }
    if (!ws_.got_text()) {
      close(websocket::close_code::unknown_data, "binary messages are not part of pitchwire.v1");
      return;
    }
    const std::string text = beast::buffers_to_string(read_buffer_.data());
    read_buffer_.consume(read_buffer_.size());
    handle_text(text);
    if (!closing_) do_read();
  }

  bool take_request_token() {
    const auto now = Clock::now();
    const double elapsed = std::chrono::duration<double>(now - last_refill_).count();
    last_refill_ = now;
    tokens_ = std::min(server_->options.request_burst, tokens_ + elapsed * server_->options.requests_per_s);
    if (tokens_ < 1.0) return false;
    tokens_ -= 1.0;
    return true;
  }

  void refuse(protocol::Error error) {
    send_own(protocol::encode(error));
    if (++refused_in_a_row_ > kMaxRefusedInARow) close(websocket::close_code::policy_error, "too many refused requests");
  }

  void handle_text(const std::string& text) {
    using protocol::ErrorCode;
    protocol::DecodeOptions decode_options;
    decode_options.max_message_bytes = server_->options.max_message_bytes;
    decode_options.reference_hz = server_->reference_hz;
    decode_options.f0_min_hz = server_->options.hello.f0_min_hz;
    decode_options.f0_max_hz = server_->options.hello.f0_max_hz;
    // Every message costs a token before it is parsed: malformed ones must not be a way around the
    // limit (parsing is the expensive part, on the thread that also serves everyone's frames).
    if (!take_request_token()) {
      refuse({ErrorCode::kRateLimited,
              fmt::format("too many requests: at most {:g} per second, bursts of {:g}",
                          server_->options.requests_per_s, server_->options.request_burst),
              ""});
      return;
    }
    protocol::Decoded decoded = protocol::decode_request(text, decode_options);
    if (auto* error = std::get_if<protocol::Error>(&decoded)) {
      refuse(std::move(*error));
      return;
    }
    auto& request = std::get<protocol::Request>(decoded);
    const std::string& id = protocol::id_of(request);
    const protocol::ClientType type = protocol::type_of(request);
    const bool needs_supervisor = type == protocol::ClientType::kSetBand || type == protocol::ClientType::kClearBand ||
                                  type == protocol::ClientType::kStartExercise ||
                                  type == protocol::ClientType::kEndExercise ||
                                  type == protocol::ClientType::kSetReference;
    if (needs_supervisor && role_ != protocol::Role::kSupervisor) {
      refuse({ErrorCode::kForbidden,
              std::string(protocol::name(type)) + " needs the supervisor role; this connection is " +
                  std::string(protocol::name(role_)),
              id});
      return;
    }
    if (type == protocol::ClientType::kMark && role_ == protocol::Role::kObserver) {
      refuse({ErrorCode::kForbidden, "mark needs the lab or supervisor role; this connection is observer", id});
      return;
    }
    refused_in_a_row_ = 0;
    std::visit([this](auto& r) { handle(r); }, request);
  }

  void handle(protocol::Subscribe& r) {
    if (subscribed_) server_->field_set_users[fields_.bits()].fetch_sub(1);
    subscribed_ = true;
    fields_ = r.fields;
    settled_ = r.settled;
    decimation_ = protocol::decimation(r.rate, server_->options.hello.hop_ms);
    server_->field_set_users[fields_.bits()].fetch_add(1);
    send_own(protocol::encode(protocol::subscribe_ack(r, server_->options.hello.hop_ms)));
  }

  void handle(protocol::SetReference& r) {
    server_->reference_hz = r.reference_hz;
    if (server_->options.on_reference) server_->options.on_reference(r.reference_hz);
    ack(r.id, protocol::ClientType::kSetReference);
    server_->broadcast_event(by_me(protocol::reference_changed_event(server_->now_audio(), r.reference_hz)));
  }

  void handle(protocol::Ping& r) {
    protocol::Pong pong{r.id, server_->now_audio()};
    send_own(protocol::encode(pong));
  }

  void handle(protocol::Mark& r) {
    const double now = server_->now_audio();
    protocol::Event event = protocol::marker_event(now, r);
    event.by = role_;
    // Stamped on the audio clock as a sample index of the input too, and on the wall clock.
    event.payload["sample"] = static_cast<std::int64_t>(std::llround(now * server_->options.hello.audio.sample_rate_hz));
    event.payload["wall"] = utc_wall_clock(std::chrono::system_clock::now());
    ack(r.id, protocol::ClientType::kMark);
    server_->broadcast_event(event);
  }

  void handle(protocol::SetBand& r) {
    std::vector<protocol::Band> bands;
    {
      std::lock_guard lock(server_->state_mutex);
      auto it = std::find_if(server_->bands.begin(), server_->bands.end(),
                             [&](const protocol::Band& b) { return b.name == r.band.name; });
      if (it != server_->bands.end()) {
        *it = r.band;
      } else if (server_->bands.size() >= kMaxBands) {
        refuse({protocol::ErrorCode::kOutOfRange,
                "at most " + std::to_string(kMaxBands) + " bands; clear one before adding \"" + r.band.name + "\"",
                r.id});
        return;
      } else {
        server_->bands.push_back(r.band);
      }
      bands = server_->bands;
    }
    ack(r.id, protocol::ClientType::kSetBand);
    server_->mirror_bands(bands);
    if (server_->options.on_bands) server_->options.on_bands(bands);
    server_->broadcast_event(by_me(protocol::band_changed_event(server_->now_audio(), r.band.name, bands)));
  }

  void handle(protocol::ClearBand& r) {
    std::vector<protocol::Band> bands;
    {
      std::lock_guard lock(server_->state_mutex);
      auto it = std::find_if(server_->bands.begin(), server_->bands.end(),
                             [&](const protocol::Band& b) { return b.name == r.name; });
      if (it == server_->bands.end()) {
        refuse({protocol::ErrorCode::kUnknownBand, "no band named \"" + r.name + "\"", r.id});
        return;
      }
      server_->bands.erase(it);
      bands = server_->bands;
    }
    ack(r.id, protocol::ClientType::kClearBand);
    server_->mirror_bands(bands);
    if (server_->options.on_bands) server_->options.on_bands(bands);
    server_->broadcast_event(by_me(protocol::band_changed_event(server_->now_audio(), r.name, bands)));
  }

  void handle(protocol::StartExercise& r) {
    const auto& presets = server_->options.presets;
    const auto preset = std::find_if(presets.begin(), presets.end(),
                                     [&](const ExercisePreset& p) { return p.name == r.preset; });
    if (preset == presets.end()) {
      std::string known;
      for (const auto& p : presets) known += (known.empty() ? "" : ", ") + p.name;
      refuse({protocol::ErrorCode::kUnknownPreset, "no exercise preset \"" + r.preset + "\"; known: " + known, r.id});
      return;
    }
    // The preset's bands, decoded now: semitone limits follow the reference as it is at the start.
    std::vector<protocol::Band> preset_bands;
    {
      protocol::DecodeOptions limits;
      limits.reference_hz = server_->reference_hz;
      limits.f0_min_hz = server_->options.hello.f0_min_hz;
      limits.f0_max_hz = server_->options.hello.f0_max_hz;
      if (const auto error = decode_preset_bands(*preset, limits, preset_bands)) {
        refuse({error->code, "exercise \"" + r.preset + "\": its band " + error->message, r.id});
        return;
      }
    }
    protocol::Exercise exercise{r.preset, r.label, server_->now_audio()};
    std::vector<protocol::Band> bands;
    {
      std::lock_guard lock(server_->state_mutex);
      if (server_->exercise) {
        refuse({protocol::ErrorCode::kExerciseRunning,
                "exercise \"" + server_->exercise->preset + "\" is running; end it first", r.id});
        return;
      }
      const auto added = std::count_if(preset_bands.begin(), preset_bands.end(), [&](const protocol::Band& b) {
        return std::none_of(server_->bands.begin(), server_->bands.end(),
                            [&](const protocol::Band& x) { return x.name == b.name; });
      });
      if (server_->bands.size() + static_cast<std::size_t>(added) > kMaxBands) {
        refuse({protocol::ErrorCode::kOutOfRange,
                "exercise \"" + r.preset + "\" sets " + std::to_string(preset_bands.size()) + " bands; at most " +
                    std::to_string(kMaxBands) + " in all: clear some first",
                r.id});
        return;
      }
      // The preset's bands replace bands of the same name.
      for (const protocol::Band& b : preset_bands) {
        auto it = std::find_if(server_->bands.begin(), server_->bands.end(),
                               [&](const protocol::Band& x) { return x.name == b.name; });
        if (it != server_->bands.end()) {
          *it = b;
        } else {
          server_->bands.push_back(b);
        }
      }
      bands = server_->bands;
      server_->exercise = exercise;
      const std::lock_guard summary_lock(server_->exercise_mutex);
      server_->exercise_summary.emplace(server_->options.hello.hop_ms / 1000.0);
      server_->exercise_from_s = exercise.started_s;
      server_->exercise_bands = bands;
      server_->exercise_measures = preset->measures;
      server_->exercise_running.store(true);
    }
    ack(r.id, protocol::ClientType::kStartExercise);
    if (!preset_bands.empty()) {
      if (server_->options.on_bands) server_->options.on_bands(bands);
      for (const protocol::Band& b : preset_bands)
        server_->broadcast_event(by_me(protocol::band_changed_event(exercise.started_s, b.name, bands)));
    }
    server_->broadcast_event(by_me(protocol::exercise_started_event(exercise.started_s, exercise)));
  }

  void handle(protocol::EndExercise& r) {
    std::optional<protocol::Event> ended = server_->end_exercise(role_);
    if (!ended) {
      refuse({protocol::ErrorCode::kNoExercise, "no exercise is running", r.id});
      return;
    }
    ack(r.id, protocol::ClientType::kEndExercise);
    server_->broadcast_event(*ended);
  }

  // An event caused by this connection's request: it says which role made the change.
  protocol::Event by_me(protocol::Event event) const {
    event.by = role_;
    return event;
  }

  void ack(const std::string& id, protocol::ClientType type) {
    protocol::Ack a;
    a.id = id;
    a.request = type;
    send_own(protocol::encode(a));
  }

  void send_own(protocol::Encoded encoded) {
    auto message = std::make_shared<SharedMessage>(SharedMessage{std::move(encoded)});
    push_reply(message->encoded.type, message, message->encoded.body);
  }

  void push_reply(protocol::ServerType type, std::shared_ptr<const void> owner, std::string_view body) {
    if (closing_) return;
    if (queue_.size() - queued_frames_ >= kMaxQueuedReplies) {
      close(websocket::close_code::policy_error, "too slow: messages not read");
      return;
    }
    queue_.emplace_back(type, next_seq_++, std::move(owner), body, false);
    maybe_write();
  }

  void push_frame(protocol::ServerType type, std::shared_ptr<const void> owner, const char* data, std::size_t size) {
    if (queued_frames_ >= server_->options.queue_frames) {
      // Newest wins: drop the oldest queued frame (the one being written is not in the queue). Its seq
      // becomes a gap.
      auto victim = std::find_if(queue_.begin(), queue_.end(), [](const Outgoing& o) { return o.droppable; });
      if (victim != queue_.end()) {
        queue_.erase(victim);
        --queued_frames_;
        ++dropped_unreported_;
        ++dropped_total_;
        // Behind: dropping frames with no pause of a second or more since behind_since_. A client that
        // reads in bursts but never catches up for a whole second stays behind.
        const auto now = Clock::now();
        if (!behind_since_ || now - last_drop_ > std::chrono::seconds(1)) behind_since_ = now;
        last_drop_ = now;
        if (now - *behind_since_ > std::chrono::duration<double>(server_->options.slow_client_s)) {
          spdlog::info("closing a client that stayed behind for more than {} s ({} frames dropped)",
                       server_->options.slow_client_s, dropped_total_);
          close(websocket::close_code::policy_error, "too slow: behind for too long");
          return;
        }
      }
    }
    queue_.emplace_back(type, next_seq_++, std::move(owner), std::string_view(data, size), true);
    ++queued_frames_;
    maybe_write();
  }

  void maybe_write() {
    if (in_flight_ || closing_ || queue_.empty()) return;
    write_front();
  }

  // Moves the oldest message out of the queue and writes it. It stays in in_flight_ (its buffers are in
  // use) until on_write, so that dropping frames from the queue never touches it.
  void write_front() {
    in_flight_.emplace(std::move(queue_.front()));
    queue_.pop_front();
    if (in_flight_->droppable) --queued_frames_;
    const std::array<net::const_buffer, 2> buffers{net::buffer(in_flight_->head.view()),
                                                   net::buffer(in_flight_->body)};
    ws_.async_write(buffers, beast::bind_front_handler(&WsSession::on_write, shared_from_this()));
  }

  void on_write(beast::error_code ec, std::size_t) {
    in_flight_.reset();
    if (ec) {
      finish();
      return;
    }
    if (closing_) {
      if (queue_.empty()) {
        start_close();
      } else {
        write_front();
      }
      return;
    }
    if (dropped_unreported_ > 0) {
      const auto now = Clock::now();
      if (queued_frames_ * 2 < server_->options.queue_frames || now - last_drop_report_ >= std::chrono::seconds(1)) {
        last_drop_report_ = now;
        const std::int64_t count = dropped_unreported_;
        dropped_unreported_ = 0;
        send_own(protocol::encode(protocol::dropped_frames_event(server_->now_audio(), count)));
      }
    }
    maybe_write();
  }

  void start_close() {
    if (close_started_) return;
    close_started_ = true;
    ws_.async_close(close_reason_, [self = shared_from_this()](beast::error_code) {
      self->close_timer_.cancel();
      self->finish();
    });
  }

  void finish() {
    if (finished_) return;
    finished_ = true;
    server_->remove_session(this);
  }

  // A plain socket under the WebSocket (not beast::tcp_stream): the WebSocket keeps its own timeouts,
  // and the per-operation timer bookkeeping of tcp_stream is a measurable cost at this message rate.
  websocket::stream<tcp::socket> ws_;
  std::shared_ptr<Server::Impl> server_;
  protocol::Role role_;
  beast::flat_buffer read_buffer_;
  std::deque<Outgoing> queue_;           // waiting to be written
  std::optional<Outgoing> in_flight_;    // being written
  std::size_t queued_frames_ = 0;        // frames (droppable) in queue_
  std::uint64_t next_seq_ = 1;
  bool closing_ = false;
  bool close_started_ = false;
  bool finished_ = false;
  websocket::close_reason close_reason_;
  net::steady_timer close_timer_;

  bool subscribed_ = false;
  bool settled_ = false;
  protocol::FieldSet fields_ = protocol::FieldSet::all();
  int decimation_ = 1;
  std::optional<std::int64_t> first_frame_index_;  // index of the first frame queued for this connection

  std::int64_t dropped_unreported_ = 0;
  std::int64_t dropped_total_ = 0;
  std::optional<Clock::time_point> behind_since_;
  Clock::time_point last_drop_{};
  Clock::time_point last_drop_report_{};

  double tokens_ = 0.0;
  Clock::time_point last_refill_;
  int refused_in_a_row_ = 0;

 };

// ---- HTTP connection (static files, and the upgrade to WebSocket) ------------------------------------

class HttpSession : public std::enable_shared_from_this<HttpSession> {
 public:
  HttpSession(tcp::socket&& socket, std::shared_ptr<Server::Impl> server)
      : stream_(std::move(socket)), server_(std::move(server)) {}

  void run() {
    net::dispatch(stream_.get_executor(), beast::bind_front_handler(&HttpSession::do_read, shared_from_this()));
  }

 private:
  void do_read() {
    parser_.emplace();
    parser_->header_limit(kMaxHttpHeaderBytes);
    parser_->body_limit(server_->options.max_message_bytes);
    stream_.expires_after(kHttpTimeout);
    http::async_read(stream_, buffer_, *parser_, beast::bind_front_handler(&HttpSession::on_read, shared_from_this()));
  }

  void on_read(beast::error_code ec, std::size_t) {
    if (ec == http::error::end_of_stream) {
      stream_.socket().shutdown(tcp::socket::shutdown_send, ec);
      return;
    }
    if (ec) {
      if (ec != beast::error::timeout && ec != net::error::operation_aborted && ec != net::error::connection_reset) {
        send_error(http::status::bad_request, "bad request: " + ec.message(), 11);
      }
      return;
    }
    http::request<http::string_body> req = parser_->release();
    const std::string host(req[http::field::host]);
    if (host.empty()) {
      send_error(http::status::bad_request, "no Host header", req.version());  // RFC 9112 3.2
      return;
    }
    if (!server_->host_allowed(host)) {
      // DNS rebinding: a page from another site reaching us under its own name.
      spdlog::warn("refused a request with Host \"{}\"", host.substr(0, 80));
      send_error(http::status::forbidden, "Host \"" + host.substr(0, 80) + "\" is not this server", req.version());
      return;
    }
    if (websocket::is_upgrade(req)) {
      upgrade(std::move(req));
      return;
    }
    serve_file(req);
  }

  void upgrade(http::request<http::string_body>&& req) {
    const std::string target(req.target());
    if (path_of(target) != protocol::kWebSocketPath) {
      send_error(http::status::not_found, "the WebSocket endpoint is " + std::string(protocol::kWebSocketPath),
                 req.version());
      return;
    }
    if (req.count(http::field::origin) > 0) {
      const std::string origin(req[http::field::origin]);
      if (!server_->origin_allowed(origin, std::string(req[http::field::host]))) {
        // Cross-site WebSocket hijacking: only our own page may connect from a browser.
        spdlog::warn("refused a WebSocket from Origin \"{}\"", origin.substr(0, 80));
        send_error(http::status::forbidden, "Origin \"" + origin.substr(0, 80) + "\" may not connect",
                   req.version());
        return;
      }
    }
    bool offers_v1 = false;
    std::string token = query_value(target, "token");
    const std::string offered(req[http::field::sec_websocket_protocol]);
    std::string_view rest = offered;
    while (!rest.empty()) {
      const auto comma = rest.find(',');
      const std::string_view item = trim(rest.substr(0, comma));
      if (item == protocol::kSubprotocol) offers_v1 = true;
      if (item.substr(0, kTokenProtocolPrefix.size()) == kTokenProtocolPrefix) {
        token = std::string(item.substr(kTokenProtocolPrefix.size()));
      }
      if (comma == std::string_view::npos) break;
      rest.remove_prefix(comma + 1);
    }
    if (!offers_v1) {
      send_error(http::status::bad_request,
                 "offer the subprotocol " + std::string(protocol::kSubprotocol) + " in Sec-WebSocket-Protocol",
                 req.version());
      return;
    }
    protocol::Role role = protocol::Role::kObserver;
    beast::error_code addr_ec;
    const std::string address = stream_.socket().remote_endpoint(addr_ec).address().to_string();
    if (!token.empty()) {
      // Compare with both tokens always, so timing does not tell which one was near.
      const bool supervisor = tokens_equal(token, server_->options.supervisor_token);
      const bool lab = tokens_equal(token, server_->options.lab_token);
      const bool observer = !server_->options.observer_token.empty() &&
                            tokens_equal(token, server_->options.observer_token);
      if (supervisor) {
        role = protocol::Role::kSupervisor;
      } else if (lab) {
        role = protocol::Role::kLab;
      } else if (observer) {
        role = protocol::Role::kObserver;
      } else {
        if (server_->token_failed(address)) {
          send_error(http::status::too_many_requests,
                     "too many unknown tokens from this address; try again in a minute", req.version());
          return;
        }
        spdlog::warn("refused a WebSocket with an unknown token from {}", address);
        send_error(http::status::forbidden, "unknown token", req.version());
        return;
      }
    }
    if (token.empty() && server_->options.require_token) {
      spdlog::warn("refused a WebSocket without a token (listening beyond this machine)");
      send_error(http::status::unauthorized,
                 "a token is needed: this daemon listens beyond this machine (docs/daemon.md)", req.version());
      return;
    }
    if (server_->session_count.load() >= static_cast<std::size_t>(server_->options.max_clients)) {
      send_error(http::status::service_unavailable,
                 "too many connections (at most " + std::to_string(server_->options.max_clients) + ")", req.version());
      return;
    }
    stream_.expires_never();  // the WebSocket has timeouts of its own
    // A fixed, small kernel send buffer (no autotuning up to megabytes): frames for a client that does
    // not read pile up in our bounded queue, where the newest win, rather than as stale seconds in the
    // kernel.
    beast::error_code ignored;
    stream_.socket().set_option(net::socket_base::send_buffer_size(kSocketSendBufferBytes), ignored);
    auto session = std::make_shared<WsSession>(stream_.release_socket(), server_, role);
    session->run(std::move(req));
  }

  void serve_file(const http::request<http::string_body>& req) {
    if (req.method() != http::verb::get && req.method() != http::verb::head) {
      send_error(http::status::method_not_allowed, "only GET and HEAD", req.version(), "GET, HEAD");
      return;
    }
    const auto decoded = decode_path(path_of(std::string_view(req.target().data(), req.target().size())));
    if (!decoded || decoded->empty() || decoded->front() != '/') {
      send_error(http::status::bad_request, "bad path", req.version());
      return;
    }
    std::string rel = decoded->substr(1);
    if (rel.empty() || rel.back() == '/') rel += "index.html";
    const std::filesystem::path relative(rel);
    for (const auto& part : relative) {
      if (part == ".." || part == ".") {
        send_error(http::status::bad_request, "bad path", req.version());
        return;
      }
    }
    // An absolute path ("//etc/passwd") would replace the root when joined: never a file of ours.
    if (relative.has_root_directory() || relative.has_root_name()) {
      send_error(http::status::bad_request, "bad path", req.version());
      return;
    }
    std::error_code fs_ec;
    const std::filesystem::path root = std::filesystem::canonical(server_->options.web_root, fs_ec);
    if (fs_ec || root.empty()) {  // no web root: nothing to serve (never fall back to "" or "/")
      send_error(http::status::not_found, "not found", req.version());
      return;
    }
    const std::filesystem::path full = std::filesystem::weakly_canonical(root / relative, fs_ec);
    // The canonical path (symlinks resolved) must still lie inside the root.
    const auto [root_end, full_it] = std::mismatch(root.begin(), root.end(), full.begin(), full.end());
    if (fs_ec || root_end != root.end() || !std::filesystem::is_regular_file(full, fs_ec)) {
      send_error(http::status::not_found, "not found", req.version());
      return;
    }
    beast::error_code ec;
    http::file_body::value_type body;
    body.open(full.c_str(), beast::file_mode::scan, ec);
    if (ec) {
      send_error(http::status::not_found, "not found", req.version());
      return;
    }
    const auto size = body.size();
    auto res = std::make_shared<http::response<http::file_body>>(std::piecewise_construct,
                                                                 std::make_tuple(std::move(body)),
                                                                 std::make_tuple(http::status::ok, req.version()));
    set_common_headers(*res);
    res->set(http::field::content_type, mime_type(full));
    res->content_length(size);
    res->keep_alive(req.keep_alive());
    if (req.method() == http::verb::head) {
      http::response<http::empty_body> head{http::status::ok, req.version()};
      set_common_headers(head);
      head.set(http::field::content_type, mime_type(full));
      head.content_length(size);
      head.keep_alive(req.keep_alive());
      write(std::make_shared<http::response<http::empty_body>>(std::move(head)));
      return;
    }
    write(res);
  }

  template <class Response>
  static void set_common_headers(Response& res) {
    res.set(http::field::server, "pitchwired/" PITCHWIRE_VERSION);
    res.set(http::field::cache_control, "no-store");
    res.set("X-Content-Type-Options", "nosniff");
    res.set("Referrer-Policy", "no-referrer");
    // Nothing on the page comes from elsewhere, and the page talks only to this server.
    res.set("Content-Security-Policy", "default-src 'self'; connect-src 'self'; frame-ancestors 'none'");
  }

  // allow: the Allow header a 405 must carry (RFC 9110 15.5.6).
  void send_error(http::status status, const std::string& text, unsigned version, const char* allow = nullptr) {
    auto res = std::make_shared<http::response<http::string_body>>(status, version);
    set_common_headers(*res);
    if (allow) res->set(http::field::allow, allow);
    res->set(http::field::content_type, "text/plain; charset=utf-8");
    res->body() = text + "\n";
    res->prepare_payload();
    res->keep_alive(false);
    write(res);
  }

  template <class Response>
  void write(std::shared_ptr<Response> res) {
    const bool keep_alive = res->keep_alive();
    http::async_write(stream_, *res,
                      [self = shared_from_this(), res, keep_alive](beast::error_code ec, std::size_t) {
                        if (ec || !keep_alive) {
                          self->stream_.socket().shutdown(tcp::socket::shutdown_send, ec);
                          return;
                        }
                        self->do_read();
                      });
  }

  beast::tcp_stream stream_;
  beast::flat_buffer buffer_;
  std::optional<http::request_parser<http::string_body>> parser_;
  std::shared_ptr<Server::Impl> server_;
};

// ---- Impl: accept, registry, fan-out -------------------------------------------------------------------

void Server::Impl::do_accept() {
  acceptor.async_accept(ioc, [self = shared_from_this()](beast::error_code ec, tcp::socket socket) {
    if (self->stopping.load()) return;
    if (!ec) {
      beast::error_code ignored;
      socket.set_option(tcp::no_delay(true), ignored);  // frames are small and late ones are useless
      std::make_shared<HttpSession>(std::move(socket), self)->run();
    } else if (ec != net::error::operation_aborted) {
      // Out of descriptors (EMFILE) and the like: the pending connection stays pending, so accepting again
      // at once would spin and flood the log. Wait a little; say it once per pause.
      spdlog::warn("accept failed: {}; trying again in {} ms", ec.message(), kAcceptRetry.count());
      self->accept_timer.expires_after(kAcceptRetry);
      self->accept_timer.async_wait([self](beast::error_code e) {
        if (!e && !self->stopping.load()) self->do_accept();
      });
      return;
    }
    self->do_accept();
  });
}

// A copy of the registry to iterate over: a delivery may end in a connection removing itself.
const std::vector<std::shared_ptr<WsSession>>& Server::Impl::snapshot() {
  fan_out_scratch.assign(sessions.begin(), sessions.end());
  return fan_out_scratch;
}

void Server::Impl::add_session(const std::shared_ptr<WsSession>& s) {
  sessions.push_back(s);
  session_count.store(sessions.size());
  spdlog::info("client connected as {} ({} connected)", protocol::name(s->role()), sessions.size());
}

void Server::Impl::remove_session(const WsSession* s) {
  std::erase_if(sessions, [s](const std::shared_ptr<WsSession>& p) { return p.get() == s; });
  session_count.store(sessions.size());
  spdlog::info("client disconnected ({} connected)", sessions.size());
}

void Server::Impl::fan_out_frame(const std::shared_ptr<const FrameBatch>& batch) {
  for (const auto& s : snapshot()) s->deliver_frame(batch);
  fan_out_scratch.clear();
}

void Server::Impl::fan_out_settled(const std::shared_ptr<const SettledBatch>& batch) {
  for (const auto& s : snapshot()) s->deliver_settled(batch);
  fan_out_scratch.clear();
}

void Server::Impl::broadcast(const protocol::Encoded& message) {
  deliver_all(std::make_shared<const SharedMessage>(SharedMessage{message}));
}

void Server::Impl::deliver_all(const std::shared_ptr<const SharedMessage>& shared) {
  for (const auto& s : snapshot()) s->deliver(shared);
  fan_out_scratch.clear();
}

void Server::Impl::post_broadcast(protocol::Encoded message) {
  auto shared = std::make_shared<const SharedMessage>(SharedMessage{std::move(message)});
  net::post(ioc, [self = shared_from_this(), shared = std::move(shared)] { self->deliver_all(shared); });
}

// ---- Server --------------------------------------------------------------------------------------------

Server::Server(ServerOptions options) : impl_(std::make_shared<Impl>(std::move(options))) {}

Server::~Server() { stop(); }

void Server::start() {
  auto& o = impl_->options;
  beast::error_code ec;
  const auto address = net::ip::make_address(o.bind, ec);
  if (ec) throw std::runtime_error("cannot listen on \"" + o.bind + "\": not an IP address");
  const tcp::endpoint endpoint(address, static_cast<unsigned short>(o.port));
  const std::string where = (address.is_v6() ? "[" + o.bind + "]" : o.bind) + ":" + std::to_string(o.port);
  auto fail = [&](const char* what) {
    throw std::runtime_error("cannot listen on " + where + ": " + what + ": " + ec.message());
  };
  impl_->acceptor.open(endpoint.protocol(), ec);
  if (ec) fail("open");
  impl_->acceptor.set_option(net::socket_base::reuse_address(true), ec);
  impl_->acceptor.bind(endpoint, ec);
  if (ec) fail("bind");
  impl_->acceptor.listen(net::socket_base::max_listen_connections, ec);
  if (ec) fail("listen");
  impl_->bound_port = impl_->acceptor.local_endpoint().port();

  const std::string port = std::to_string(impl_->bound_port);
  std::vector<std::string> names = {"127.0.0.1", "localhost", "[::1]"};
  // The bind address itself, unless it is one of the names above (127.0.0.2 is loopback too).
  if (o.bind != "127.0.0.1" && o.bind != "::1") names.push_back(address.is_v6() ? "[" + o.bind + "]" : o.bind);
  for (const auto& n : names) {
    impl_->allowed_hosts.push_back(lower(n + ":" + port));
    impl_->allowed_origins.push_back(lower("http://" + n + ":" + port));
  }

  impl_->work.emplace(impl_->ioc.get_executor());
  impl_->do_accept();
  impl_->thread = std::thread([impl = impl_] {
    pthread_setname_np(pthread_self(), "pw-net");
    impl->ioc.run();
  });
}

void Server::stop() noexcept {
  if (!impl_ || impl_->stopping.exchange(true)) return;
  try {
    std::promise<void> closing;
    auto closed = closing.get_future();
    net::post(impl_->ioc, [impl = impl_, &closing] {
      beast::error_code ignored;
      impl->acceptor.close(ignored);
      impl->accept_timer.cancel();
      // An exercise still running is ended by the daemon, so that its summary reaches every connection
      // and the session record before they close.
      if (auto ended = impl->end_exercise(std::nullopt)) {
        spdlog::info("exercise \"{}\" was running at stop: ended and summarised", ended->payload.value("preset", ""));
        impl->broadcast_event(*ended);
      }
      for (const auto& s : impl->snapshot()) {
        s->close(websocket::close_code::going_away, "pitchwired is stopping", true);
      }
      impl->fan_out_scratch.clear();
      closing.set_value();
    });
    // The close job first (it runs at once unless the network thread is stuck), then the closing
    // handshakes (each connection also shuts its socket after kCloseGrace).
    const auto deadline = Clock::now() + kCloseGrace + std::chrono::milliseconds(200);
    const bool close_ran = closed.wait_until(deadline) == std::future_status::ready;
    while (impl_->session_count.load() > 0 && Clock::now() < deadline) {
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    }
    impl_->work.reset();
    impl_->ioc.stop();
    if (impl_->thread.joinable()) impl_->thread.join();
    // The network thread is gone: this thread may touch the server's state now. Close what is left,
    // then run the handlers that are still queued (their operations complete as aborted) so that they,
    // and the references to the server they hold, are freed.
    beast::error_code ignored;
    impl_->acceptor.close(ignored);
    impl_->accept_timer.cancel();
    for (const auto& s : impl_->sessions) s->shut();
    impl_->sessions.clear();
    impl_->session_count.store(0);
    impl_->ioc.restart();
    for (int round = 0; round < 100 && impl_->ioc.poll() > 0; ++round) {
    }
    if (!close_ran) spdlog::warn("the network thread did not answer the stop in time");
  } catch (const std::exception& e) {
    spdlog::error("while stopping the server: {}", e.what());
  }
}

void Server::set_audio_format(const protocol::AudioFormat& format) { impl_->options.hello.audio = format; }

int Server::port() const { return impl_->bound_port; }
std::size_t Server::connections() const { return impl_->session_count.load(); }
bool Server::input_ended() const { return impl_->input_ended.load(); }

void Server::on_live(const dsp::LiveFrame& frame) {
  auto batch = std::make_shared<FrameBatch>();
  batch->frame = frame;
  for (unsigned bits = 0; bits < batch->bodies.size(); ++bits) {
    if (impl_->field_set_users[bits].load(std::memory_order_relaxed) > 0) {
      batch->bodies[bits] =
          std::make_shared<const std::string>(protocol::encode_frame(frame, field_set_from_bits(bits)).body);
    }
  }
  net::post(impl_->ioc, [impl = impl_, batch = std::shared_ptr<const FrameBatch>(std::move(batch))] {
    impl->fan_out_frame(batch);
  });
}

void Server::on_settled(const dsp::SettledFrame& frame) {
  if (impl_->exercise_running.load(std::memory_order_acquire)) {
    const std::lock_guard lock(impl_->exercise_mutex);
    if (impl_->exercise_summary && frame.time_s >= impl_->exercise_from_s) {
      impl_->exercise_summary->add(frame.f0_hz, impl_->exercise_bands);
    }
  }
  auto batch = std::make_shared<SettledBatch>();
  batch->index = frame.index;
  batch->body = protocol::encode_settled(frame).body;
  net::post(impl_->ioc, [impl = impl_, batch = std::shared_ptr<const SettledBatch>(std::move(batch))] {
    impl->fan_out_settled(batch);
  });
}

void Server::on_stats(const protocol::Stats& stats) {
  impl_->post_broadcast(protocol::encode(stats));
}

void Server::on_event(const protocol::Event& event) {
  if (event.kind == protocol::EventKind::kOverflow) {
    spdlog::warn("{} at {:.3f} s: {}", protocol::name(event.kind), event.time_s, event.payload.dump());
  } else {
    spdlog::debug("{} at {:.3f} s: {}", protocol::name(event.kind), event.time_s, event.payload.dump());
  }
  impl_->post_event(event);
}

std::optional<protocol::Event> Server::Impl::end_exercise(std::optional<protocol::Role> by) {
  protocol::Exercise ended;
  std::optional<ExerciseSummary> measures;
  std::vector<std::string> measure_names;
  const double now = now_audio();
  {
    std::lock_guard lock(state_mutex);
    if (!exercise) return std::nullopt;
    ended = *exercise;
    exercise.reset();
    // Taken out under the lock, summarised after it: the analysis thread never waits for the sorting.
    const std::lock_guard summary_lock(exercise_mutex);
    exercise_running.store(false);
    measures = std::exchange(exercise_summary, std::nullopt);
    measure_names = exercise_measures;
  }
  protocol::Json summary = measures ? measures->to_json(now - ended.started_s, measure_names, reference_hz) : protocol::Json::object();
  protocol::Event event = protocol::exercise_ended_event(now, ended, std::move(summary));
  event.by = by;
  return event;
}

void Server::on_end() {
  net::post(impl_->ioc, [impl = impl_] { impl->input_ended.store(true); });
}

void Server::on_device_lost(const std::string& device, const std::string& reason) {
  spdlog::error("audio input {} lost: {}", device, reason);
  impl_->post_event(protocol::device_lost_event(impl_->now_audio(), device, reason));
}

void Server::on_device_back(const std::string& device) {
  spdlog::info("audio input {} is back", device);
  impl_->post_event(protocol::device_back_event(impl_->now_audio(), device));
}

}  // namespace pitchwire::daemon
