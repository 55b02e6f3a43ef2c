// live_client.cpp: see live_client.h. The `pitchwire` command's one Boost.Beast translation unit.
#include "live_client.h"

#include <boost/asio/connect.hpp>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <boost/beast/websocket.hpp>

namespace pitchwire::cli {
namespace {

namespace beast = boost::beast;
namespace http = beast::http;
namespace websocket = beast::websocket;
namespace net = boost::asio;
using tcp = net::ip::tcp;

constexpr const char* kSubprotocol = "pitchwire.v1";
constexpr const char* kTokenPrefix = "pitchwire.token.";

}  // namespace

struct LiveClient::Impl {
  net::io_context ioc;
  websocket::stream<beast::tcp_stream> ws{ioc};
  beast::flat_buffer buffer;
  std::string where;
  bool reading = false;  // an async_read is pending
  bool closing = false;  // close() has run (once)
  bool close_done = false;
  bool read_done = false;
  beast::error_code read_ec;

  // Runs the io_context until `done` or the deadline; false on timeout (the operation is then cancelled).
  template <typename Done>
  bool run_until(Done done, std::chrono::milliseconds timeout) {
    ioc.restart();
    const auto deadline = std::chrono::steady_clock::now() + timeout;
    while (!done()) {
      const auto left = deadline - std::chrono::steady_clock::now();
      if (left <= std::chrono::steady_clock::duration::zero()) return false;
      if (ioc.run_one_for(left) == 0 && ioc.stopped()) ioc.restart();
    }
    return true;
  }
};

LiveClient::LiveClient(const LiveTarget& target) : impl_(std::make_unique<Impl>()) {
  Impl& s = *impl_;
  const bool v6 = target.host.find(':') != std::string::npos;
  const std::string host_port = (v6 ? "[" + target.host + "]" : target.host) + ":" + std::to_string(target.port);
  s.where = host_port;

  beast::error_code ec;
  tcp::resolver resolver(s.ioc);
  const auto endpoints = resolver.resolve(target.host, std::to_string(target.port), ec);
  if (ec) throw LiveError("cannot find " + target.host + ": " + ec.message());

  bool connected = false;
  beast::get_lowest_layer(s.ws).expires_after(target.connect_timeout);
  beast::get_lowest_layer(s.ws).async_connect(endpoints, [&](beast::error_code e, const tcp::endpoint&) {
    ec = e;
    connected = true;
  });
  s.run_until([&] { return connected; }, target.connect_timeout + std::chrono::milliseconds(500));
  if (!connected || ec) {
    const std::string why = connected ? ec.message() : "no answer";
    throw LiveError("cannot connect to " + host_port + ": " + why + " (is pitchwired running, on this port?)");
  }

  // The daemon refuses foreign origins (docs/protocol.md): a local client presents the daemon's own.
  const std::string origin = "http://" + host_port;
  const std::string protocols = target.token.empty() ? std::string(kSubprotocol)
                                                     : std::string(kSubprotocol) + ", " + kTokenPrefix + target.token;
  s.ws.set_option(websocket::stream_base::decorator([origin, protocols](websocket::request_type& req) {
    req.set(http::field::origin, origin);
    req.set(http::field::sec_websocket_protocol, protocols);
    req.set(http::field::user_agent, "pitchwire-cli");
  }));
  websocket::response_type response;
  bool shook = false;
  s.ws.async_handshake(response, host_port, "/ws", [&](beast::error_code e) {
    ec = e;
    shook = true;
  });
  s.run_until([&] { return shook; }, target.connect_timeout + std::chrono::milliseconds(500));
  if (!shook || ec) {
    const auto status = response.result_int();
    if (status == 403 && !target.token.empty()) {
      std::string body = response.body();
      while (!body.empty() && (body.back() == '\n' || body.back() == '\r')) body.pop_back();
      throw LiveError("the daemon at " + host_port + " refused the token (HTTP 403: " + body +
                      "); use the token file the daemon wrote (supervisor.token or lab.token)");
    }
    if (status != 0 && status != 101) {
      throw LiveError("the daemon at " + host_port + " refused the connection (HTTP " + std::to_string(status) +
                      (response.body().empty() ? std::string() : ": " + response.body()) + ")");
    }
    throw LiveError("no WebSocket handshake with " + host_port + ": " + (shook ? ec.message() : "no answer") +
                    " (is it pitchwired?)");
  }
  beast::get_lowest_layer(s.ws).expires_never();
  s.ws.set_option(websocket::stream_base::timeout::suggested(beast::role_type::client));
  s.ws.read_message_max(1 << 20);
}

LiveClient::~LiveClient() { close(); }

std::string LiveClient::describe() const { return impl_->where; }

void LiveClient::send(const std::string& text) {
  beast::error_code ec;
  impl_->ws.text(true);
  impl_->ws.write(net::buffer(text), ec);
  if (ec) throw LiveError("lost the connection to " + impl_->where + ": " + ec.message());
}

std::optional<std::string> LiveClient::receive(std::chrono::milliseconds timeout) {
  Impl& s = *impl_;
  if (!s.reading) {
    s.reading = true;
    s.read_done = false;
    s.ws.async_read(s.buffer, [&s](beast::error_code e, std::size_t) {
      s.read_ec = e;
      s.read_done = true;
    });
  }
  if (!s.run_until([&s] { return s.read_done; }, timeout)) return std::nullopt;  // still pending
  s.reading = false;
  if (s.read_ec) {
    std::string why = s.read_ec.message();
    if (s.read_ec == websocket::error::closed) {
      const auto reason = s.ws.reason();
      why = "the daemon closed the connection" + (reason.reason.empty() ? std::string() : std::string(": ") + reason.reason.c_str());
    }
    throw LiveError("lost the connection to " + s.where + ": " + why);
  }
  std::string text = beast::buffers_to_string(s.buffer.data());
  s.buffer.consume(s.buffer.size());
  return text;
}

void LiveClient::close() noexcept {
  if (!impl_) return;
  Impl& s = *impl_;
  if (s.closing || !s.ws.is_open()) return;
  s.closing = true;
  beast::error_code ec;
  // A pending read would see the close; a short wait is enough for a command that ends. The handlers
  // only touch Impl, which outlives them.
  beast::get_lowest_layer(s.ws).expires_after(std::chrono::milliseconds(500));
  s.ws.async_close(websocket::close_code::normal, [&s](beast::error_code) { s.close_done = true; });
  s.run_until([&s] { return s.close_done && (!s.reading || s.read_done); }, std::chrono::milliseconds(700));
  beast::get_lowest_layer(s.ws).socket().close(ec);
}

}  // namespace pitchwire::cli
