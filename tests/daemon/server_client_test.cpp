// server_client_test.cpp: the server of pitchwired against a real C++ WebSocket client (Boost.Beast, the
// same library on the other side of the socket), in one process. A publisher thread stands in for the
// analysis thread and hands the server frames of a steady 196 Hz voice every 5 ms. Each test checks what a
// client sees against docs/protocol.md and RFC 6455 (close codes).
//
// Thread contract: each test runs the server's network thread, the publisher thread and the test's own
// blocking client on the test thread.
#include <gtest/gtest.h>

#include <atomic>
#include <chrono>
#include <filesystem>
#include <fstream>
#include <string>
#include <thread>
#include <utility>  // before Boost.Asio 1.74, whose awaitable.hpp uses std::exchange without it

#include <boost/asio.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <boost/beast/websocket.hpp>
#include <nlohmann/json.hpp>

#include "pitchwire/daemon/server.h"

namespace pitchwire::daemon {
namespace {

namespace beast = boost::beast;
namespace http = beast::http;
namespace websocket = beast::websocket;
namespace net = boost::asio;
using tcp = net::ip::tcp;
using Json = nlohmann::json;
using namespace std::chrono_literals;

constexpr std::string_view kSupervisorToken = "0123456789abcdef0123456789abcdef";
constexpr std::string_view kLabToken = "fedcba9876543210fedcba9876543210";

// A running server fed with frames by a thread of its own.
class Fixture : public ::testing::Test {
 protected:
  void SetUp() override {
    web_root_ = std::filesystem::temp_directory_path() / ("pitchwire-web-" + std::to_string(::getpid()));
    std::filesystem::create_directories(web_root_);
    std::ofstream(web_root_ / "index.html") << "<!doctype html><title>live</title>\n";
    ServerOptions o;
    o.port = 0;
    o.web_root = web_root_;
    o.max_message_bytes = 1024;
    o.requests_per_s = 20;
    o.request_burst = 10;
    o.supervisor_token = std::string(kSupervisorToken);
    o.lab_token = std::string(kLabToken);
    o.presets = {pitchwire::daemon::ExercisePreset{"sustained_vowel", "Sustained vowel", "", {}, {}, {}}};
    o.hello.server_version = "test";
    o.hello.hop_ms = 5.0;
    o.hello.settle_ms = 60.0;
    o.audio_clock = [this] { return static_cast<double>(index_.load()) * 0.005; };
    configure(o);
    server_ = std::make_unique<Server>(o);
    server_->set_audio_format({16000.0, 1});
    server_->start();
    publisher_ = std::thread([this] {
      auto next = std::chrono::steady_clock::now();
      while (!stop_.load()) {
        dsp::LiveFrame f;
        f.index = index_.fetch_add(1);
        f.time_s = static_cast<double>(f.index) * 0.005;
        f.f0_hz = 196.0f;
        f.voicing = 1.0f;
        f.confidence = 0.9f;
        f.level_dbfs = -20.0f;
        server_->on_live(f);
        if (f.index >= 12) {
          dsp::SettledFrame s;
          s.index = f.index - 12;
          s.time_s = static_cast<double>(s.index) * 0.005;
          s.f0_hz = 196.0f;
          s.live_f0_hz = 196.0f;
          server_->on_settled(s);
        }
        next += 5ms;
        std::this_thread::sleep_until(next);
      }
    });
  }

  // A variant's own settings, before the server is made.
  virtual void configure(ServerOptions&) {}

  void TearDown() override {
    stop_.store(true);
    publisher_.join();
    server_->stop();
    std::filesystem::remove_all(web_root_);
  }

  std::string host() const { return "127.0.0.1:" + std::to_string(server_->port()); }

  // A connected client with the given extra handshake decoration.
  std::unique_ptr<websocket::stream<tcp::socket>> connect(const std::string& target = "/ws",
                                                          const std::string& protocols = "pitchwire.v1",
                                                          const std::string& origin = "") {
    auto ws = std::make_unique<websocket::stream<tcp::socket>>(ioc_);
    ws->next_layer().connect(tcp::endpoint(net::ip::make_address("127.0.0.1"), static_cast<unsigned short>(server_->port())));
    ws->set_option(websocket::stream_base::decorator([protocols, origin](websocket::request_type& req) {
      req.set(http::field::sec_websocket_protocol, protocols);
      if (!origin.empty()) req.set(http::field::origin, origin);
    }));
    ws->handshake(host(), target);
    return ws;
  }

  static Json read(websocket::stream<tcp::socket>& ws) {
    beast::flat_buffer buffer;
    ws.read(buffer);
    return Json::parse(beast::buffers_to_string(buffer.data()));
  }

  // Reads until a message of `type` arrives (at most `limit` messages).
  static Json read_until(websocket::stream<tcp::socket>& ws, std::string_view type, int limit = 2000) {
    for (int i = 0; i < limit; ++i) {
      Json m = read(ws);
      if (m.at("type") == type) return m;
    }
    ADD_FAILURE() << "no " << type << " within " << limit << " messages";
    return {};
  }

  static void send(websocket::stream<tcp::socket>& ws, const std::string& text) {
    ws.text(true);
    ws.write(net::buffer(text));
  }

  // The close code the server sent, reading until the connection closes.
  static int close_code(websocket::stream<tcp::socket>& ws) {
    beast::flat_buffer buffer;
    beast::error_code ec;
    for (int i = 0; i < 5000 && !ec; ++i) {
      ws.read(buffer, ec);
      buffer.consume(buffer.size());
    }
    return ec == websocket::error::closed ? static_cast<int>(ws.reason().code) : -1;
  }

  // Status of an HTTP request with the given Host and target.
  int http_status(const std::string& host_header, const std::string& target) {
    tcp::socket socket(ioc_);
    socket.connect(tcp::endpoint(net::ip::make_address("127.0.0.1"), static_cast<unsigned short>(server_->port())));
    http::request<http::empty_body> req{http::verb::get, target, 11};
    req.set(http::field::host, host_header);
    http::write(socket, req);
    beast::flat_buffer buffer;
    http::response<http::string_body> res;
    http::read(socket, buffer, res);
    return static_cast<int>(res.result_int());
  }

  // Status of the answer to a WebSocket upgrade request (101 when it was accepted), sent as plain HTTP so
  // that the refusal itself can be read.
  int handshake_status(const std::string& target, const std::string& protocols, const std::string& origin,
                       const std::string& host_header = "") {
    tcp::socket socket(ioc_);
    socket.connect(tcp::endpoint(net::ip::make_address("127.0.0.1"), static_cast<unsigned short>(server_->port())));
    http::request<http::empty_body> req{http::verb::get, target, 11};
    req.set(http::field::host, host_header.empty() ? host() : host_header);
    req.set(http::field::connection, "Upgrade");
    req.set(http::field::upgrade, "websocket");
    req.set(http::field::sec_websocket_version, "13");
    req.set(http::field::sec_websocket_key, "dGhlIHNhbXBsZSBub25jZQ==");  // the sample key of RFC 6455 1.3
    if (!protocols.empty()) req.set(http::field::sec_websocket_protocol, protocols);
    if (!origin.empty()) req.set(http::field::origin, origin);
    http::write(socket, req);
    beast::flat_buffer buffer;
    http::response_parser<http::empty_body> parser;
    parser.skip(true);  // a 101 has no body; a refusal's body is not needed
    beast::error_code ec;
    http::read_header(socket, buffer, parser, ec);
    return static_cast<int>(parser.get().result_int());
  }

  net::io_context ioc_;
  std::filesystem::path web_root_;
  std::unique_ptr<Server> server_;
  std::thread publisher_;
  std::atomic<bool> stop_{false};
  std::atomic<std::int64_t> index_{0};
};

TEST_F(Fixture, HelloFirstThenFramesOnlyAfterSubscribeAtTheRateAsked) {
  auto ws = connect();
  const Json hello = read(*ws);
  EXPECT_EQ(hello.at("type"), "hello");  // docs/protocol.md: the daemon sends hello first
  EXPECT_EQ(hello.at("seq"), 1);
  EXPECT_EQ(hello.at("role"), "observer");
  EXPECT_EQ(hello.at("audio").at("sample_rate_hz"), 16000.0);
  // Events and stats may come unasked, frames may not: send subscribe and read its ack.
  send(*ws, R"({"type":"subscribe","id":"s1","rate":{"every":4},"fields":["f0_hz"],"settled":true})");
  Json ack = read_until(*ws, "ack");
  EXPECT_EQ(ack.at("id"), "s1");
  EXPECT_EQ(ack.at("result").at("every"), 4);
  std::int64_t seq = ack.at("seq");
  int frames = 0, settled = 0;
  for (int i = 0; i < 200; ++i) {
    const Json m = read(*ws);
    EXPECT_EQ(m.at("seq"), ++seq) << "a client that keeps up sees no gap";
    if (m.at("type") == "frame") {
      ++frames;
      EXPECT_EQ(m.at("index").get<std::int64_t>() % 4, 0) << m.dump();
      EXPECT_TRUE(m.contains("f0_hz"));
      EXPECT_FALSE(m.contains("voicing")) << "only the fields asked for";
      EXPECT_NEAR(m.at("f0_hz").get<double>(), 196.0, 1e-3);
    } else if (m.at("type") == "settled") {
      ++settled;
      EXPECT_EQ(m.at("index").get<std::int64_t>() % 4, 0) << m.dump();
    }
  }
  EXPECT_GT(frames, 50);
  EXPECT_GT(settled, 50);
}

TEST_F(Fixture, FpsRateGivesTheDecimationOfTheDocs) {
  auto ws = connect();
  read(*ws);
  // docs/protocol.md: with 5 ms hops (200 frames per second), {"fps": 60} gives n = 4, 50 frames per second.
  send(*ws, R"({"type":"subscribe","id":"s","rate":{"fps":60}})");
  const Json ack = read_until(*ws, "ack");
  EXPECT_EQ(ack.at("result").at("every"), 4);
  EXPECT_DOUBLE_EQ(ack.at("result").at("fps").get<double>(), 50.0);
}

TEST_F(Fixture, BadRequestsGetErrorsWithTheirIdAndTheConnectionStays) {
  auto ws = connect();
  read(*ws);
  const std::vector<std::pair<std::string, std::string>> cases = {
      {"{not json", "bad_json"},
      {R"([1,2])", "not_an_object"},
      {R"({"type":"dance","id":"a"})", "unknown_type"},
      {R"({"type":"ping","id":"b","extra":1})", "unknown_field"},
      {R"({"type":"subscribe","id":"c","settled":"yes"})", "wrong_type"},
      {R"({"type":"subscribe","id":"d","rate":{"every":0}})", "out_of_range"},
      {R"({"type":"set_band","id":"e","name":"t","low":200,"high":100})", "bad_band"},  // checked before the role
      {R"({"type":"set_band","id":"e2","name":"t","low":100,"high":200})", "forbidden"},
      {R"({"type":"mark","id":"f","label":"x"})", "forbidden"},
      {R"({"type":"ping","id":")" + std::string(2000, 'x') + R"("})", "too_large"},
  };
  for (const auto& [text, code] : cases) {
    SCOPED_TRACE(text.substr(0, 60));
    send(*ws, text);
    const Json e = read_until(*ws, "error");
    EXPECT_EQ(e.at("code"), code) << e.dump();
  }
  // Each of those cost a token of the burst (10, refilled at 20 per second): let one come back.
  std::this_thread::sleep_for(200ms);
  send(*ws, R"({"type":"ping","id":"still-here"})");
  EXPECT_EQ(read_until(*ws, "pong").at("id"), "still-here");
}

TEST_F(Fixture, BinaryAndHugeMessagesCloseWithTheirCodes) {
  {
    auto ws = connect();
    read(*ws);
    ws->binary(true);
    ws->write(net::buffer(std::string("\x01\x02", 2)));
    EXPECT_EQ(close_code(*ws), 1003);  // RFC 6455 7.4.1: unsupported data
  }
  {
    auto ws = connect();
    read(*ws);
    send(*ws, std::string(5000, ' '));  // above 4 x max_message_bytes (1024)
    EXPECT_EQ(close_code(*ws), 1009);   // RFC 6455 7.4.1: message too big
  }
}

TEST_F(Fixture, AFloodIsRateLimitedThenClosedAndOthersGoOn) {
  auto good = connect();
  read(*good);
  send(*good, R"({"type":"subscribe","id":"s"})");
  read_until(*good, "ack");
  auto bad = connect();
  read(*bad);
  int limited = 0;
  beast::error_code ec;
  for (int i = 0; i < 400 && !ec; ++i) {
    bad->text(true);
    bad->write(net::buffer(std::string(R"({"type":"ping","id":"p)") + std::to_string(i) + "\"}"), ec);
  }
  for (int i = 0; i < 1000; ++i) {
    beast::flat_buffer buffer;
    bad->read(buffer, ec);
    if (ec) break;
    const Json m = Json::parse(beast::buffers_to_string(buffer.data()));
    if (m.at("type") == "error" && m.at("code") == "rate_limited") ++limited;
  }
  EXPECT_GT(limited, 100);
  EXPECT_EQ(ec, websocket::error::closed);
  EXPECT_EQ(static_cast<int>(bad->reason().code), 1008);  // RFC 6455 7.4.1: policy violation
  // The other client was served all along: contiguous seq, frames still coming.
  std::int64_t seq = -1;
  for (int i = 0; i < 100; ++i) {
    const Json m = read(*good);
    if (seq >= 0) {
      EXPECT_EQ(m.at("seq").get<std::int64_t>(), seq + 1);
    }
    seq = m.at("seq");
  }
}

TEST_F(Fixture, RolesComeFromTokensAndOnlyTheSupervisorSetsBands) {
  auto observer = connect();
  EXPECT_EQ(read(*observer).at("role"), "observer");
  auto lab = connect("/ws?token=" + std::string(kLabToken));
  EXPECT_EQ(read(*lab).at("role"), "lab");
  auto supervisor = connect("/ws", "pitchwire.v1, pitchwire.token." + std::string(kSupervisorToken));
  EXPECT_EQ(read(*supervisor).at("role"), "supervisor");

  // A4 = 440 Hz (ISO 16): A3 = 220 Hz, E4 = 329.63 Hz (equal temperament, common practice).
  send(*supervisor, R"({"type":"set_band","id":"b1","name":"target","low":"A3","high":"E4"})");
  EXPECT_EQ(read_until(*supervisor, "ack").at("id"), "b1");
  Json changed;
  do changed = read_until(*observer, "event");
  while (changed.at("kind") != "band_changed");
  const Json band = changed.at("payload").at("bands").at(0);
  EXPECT_NEAR(band.at("low_hz").get<double>(), 220.0, 0.01);
  EXPECT_NEAR(band.at("high_hz").get<double>(), 329.63, 0.01);
  auto late = connect();
  EXPECT_EQ(read(*late).at("bands").size(), 1u) << "a new connection's hello lists the band";

  send(*lab, R"({"type":"mark","id":"m1","label":"trial 1 onset","data":{"trial":1}})");
  EXPECT_EQ(read_until(*lab, "ack").at("id"), "m1");
  Json marker;
  do marker = read_until(*observer, "event");
  while (marker.at("kind") != "marker");
  EXPECT_EQ(marker.at("payload").at("label"), "trial 1 onset");

  send(*supervisor, R"({"type":"start_exercise","id":"x1","preset":"warm_up"})");
  EXPECT_EQ(read_until(*supervisor, "error").at("code"), "unknown_preset");
  send(*supervisor, R"({"type":"start_exercise","id":"x2","preset":"sustained_vowel"})");
  EXPECT_EQ(read_until(*supervisor, "ack").at("id"), "x2");
  send(*supervisor, R"({"type":"start_exercise","id":"x3","preset":"sustained_vowel"})");
  EXPECT_EQ(read_until(*supervisor, "error").at("code"), "exercise_running");
  send(*supervisor, R"({"type":"end_exercise","id":"x4"})");
  EXPECT_EQ(read_until(*supervisor, "ack").at("id"), "x4");
  send(*supervisor, R"({"type":"end_exercise","id":"x5"})");
  EXPECT_EQ(read_until(*supervisor, "error").at("code"), "no_exercise");
}

TEST_F(Fixture, HandshakesFromElsewhereAreRefused) {
  EXPECT_EQ(handshake_status("/ws", "pitchwire.v1", ""), 101);
  EXPECT_EQ(handshake_status("/ws", "pitchwire.v1", "http://" + host()), 101) << "our own page";
  EXPECT_EQ(handshake_status("/ws", "pitchwire.v1", "http://evil.example"), 403) << "cross-site WebSocket hijacking";
  EXPECT_EQ(handshake_status("/ws", "", ""), 400) << "no subprotocol offered";
  EXPECT_EQ(handshake_status("/ws?token=00000000000000000000000000000000", "pitchwire.v1", ""), 403) << "unknown token";
  EXPECT_EQ(handshake_status("/elsewhere", "pitchwire.v1", ""), 404);
  EXPECT_EQ(http_status(host(), "/"), 200);
  EXPECT_EQ(http_status("evil.example:" + std::to_string(server_->port()), "/"), 403) << "DNS rebinding";
  EXPECT_EQ(http_status(host(), "/../../etc/passwd"), 400);
  EXPECT_EQ(http_status(host(), "/%2e%2e/%2e%2e/etc/passwd"), 400);
  EXPECT_EQ(http_status(host(), "/a%2fb"), 400) << "encoded slash";
  EXPECT_EQ(http_status(host(), "/missing.js"), 404);
}

// A daemon listening beyond this machine (allow_remote): every connection needs a token, observers one of
// their own; any Host is accepted (a page under another name has no token), and a browser's Origin must be
// the page it came from, that is the Host it asked.
class RemoteFixture : public Fixture {
 protected:
  static constexpr std::string_view kObserverToken = "a5a5a5a5a5a5a5a5a5a5a5a5a5a5a5a5";
  void configure(ServerOptions& o) override {
    o.require_token = true;
    o.observer_token = std::string(kObserverToken);
  }
};

TEST_F(RemoteFixture, EveryClientNeedsATokenAndOriginsMustMatchTheHost) {
  const std::string observer = "/ws?token=" + std::string(kObserverToken);
  EXPECT_EQ(handshake_status("/ws", "pitchwire.v1", ""), 401) << "no token";
  EXPECT_EQ(handshake_status(observer, "pitchwire.v1", ""), 101) << "the observer token";
  EXPECT_EQ(handshake_status("/ws?token=" + std::string(kSupervisorToken), "pitchwire.v1", ""), 101);
  EXPECT_EQ(handshake_status("/ws?token=00000000000000000000000000000000", "pitchwire.v1", ""), 403);
  const std::string lan = "192.0.2.10:" + std::to_string(server_->port());  // TEST-NET-1 (RFC 5737)
  EXPECT_EQ(handshake_status(observer, "pitchwire.v1", "http://" + lan, lan), 101) << "our page, reached over the LAN";
  EXPECT_EQ(handshake_status(observer, "pitchwire.v1", "http://evil.example", lan), 403) << "another site's page";
  EXPECT_EQ(http_status(lan, "/"), 200) << "the page is served under the name it was reached by";
  auto ws = connect(observer);
  const Json hello = read_until(*ws, "hello");
  EXPECT_EQ(hello.at("role"), "observer");
}

// Token guessing is rate-limited per address: after 5 unknown tokens, further unknown ones get 429 for the
// rest of the minute; the right token still gets in (a stale client cannot lock the supervisor out), and so
// does a connection without a token (an observer).
TEST_F(Fixture, TokenGuessingIsRateLimited) {
  for (int i = 0; i < 5; ++i) {
    EXPECT_EQ(handshake_status("/ws?token=0000000000000000000000000000000" + std::to_string(i), "pitchwire.v1", ""), 403)
        << i;
  }
  EXPECT_EQ(handshake_status("/ws?token=00000000000000000000000000000009", "pitchwire.v1", ""), 429);
  EXPECT_EQ(handshake_status("/ws?token=" + std::string(kSupervisorToken), "pitchwire.v1", ""), 101)
      << "the right token is never locked out";
  EXPECT_EQ(handshake_status("/ws?token=00000000000000000000000000000008", "pitchwire.v1", ""), 429);
  EXPECT_EQ(handshake_status("/ws", "pitchwire.v1", ""), 101) << "observers are not locked out";
}

TEST_F(Fixture, StoppingClosesEveryClientWithGoingAway) {
  auto ws = connect();
  read(*ws);
  std::thread stopper([this] {
    std::this_thread::sleep_for(100ms);
    const auto t0 = std::chrono::steady_clock::now();
    server_->stop();
    EXPECT_LT(std::chrono::steady_clock::now() - t0, 1s);
  });
  EXPECT_EQ(close_code(*ws), 1001);  // RFC 6455 7.4.1: going away
  stopper.join();
}

}  // namespace
}  // namespace pitchwire::daemon
