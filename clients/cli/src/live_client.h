// live_client.h: a WebSocket connection to a running pitchwired (protocol v1, docs/protocol.md) for the
// terminal commands. The one Boost.Beast translation unit of the `pitchwire` command is live_client.cpp.
//
// Thread contract: one thread uses a LiveClient (the command's main thread); it is not shared.
#pragma once

#include <chrono>
#include <memory>
#include <optional>
#include <stdexcept>
#include <string>

namespace pitchwire::cli {

// Could not connect, the handshake was refused, or the connection broke. what() is one line for the user.
class LiveError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

struct LiveTarget {
  std::string host = "127.0.0.1";
  int port = 7350;
  std::string token;  // empty: observer; else the supervisor's or lab's token (sent as a subprotocol entry)
  std::chrono::milliseconds connect_timeout{5000};
};

class LiveClient {
 public:
  // Connects and completes the WebSocket handshake (Origin http://HOST:PORT, subprotocol pitchwire.v1).
  // Throws LiveError: "cannot connect to 127.0.0.1:7350: Connection refused (is pitchwired running?)",
  // "the daemon refused the token (HTTP 403: unknown token)", ...
  explicit LiveClient(const LiveTarget& target);
  ~LiveClient();
  LiveClient(const LiveClient&) = delete;
  LiveClient& operator=(const LiveClient&) = delete;

  // Sends one text message. Throws LiveError when the connection is gone.
  void send(const std::string& text);
  // The next message, or empty when none came within `timeout`. Throws LiveError when the connection
  // closes (with the daemon's close reason, such as "pitchwired is stopping").
  [[nodiscard]] std::optional<std::string> receive(std::chrono::milliseconds timeout);
  // Closes politely (a close frame); never throws.
  void close() noexcept;

  [[nodiscard]] std::string describe() const;  // "127.0.0.1:7350"

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace pitchwire::cli
