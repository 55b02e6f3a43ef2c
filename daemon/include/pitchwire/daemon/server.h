// server.h: the HTTP + WebSocket server of pitchwired (Boost.Beast) and its publisher.
//
// One port serves the static files of the live page (web_root) over HTTP and upgrades `/ws` to protocol
// v1 (subprotocol `pitchwire.v1`). The server is also the pipeline's listener: each frame is encoded once
// per field set in use, on the analysis thread, and handed to the network thread, which queues it on every
// subscribed connection. One network thread serves every connection (it is their implicit strand);
// each connection has a bounded write queue: frames are
// droppable (newest wins, drops counted and told to that client), replies and events are not; a client
// that stays behind for longer than slow_client_s is closed with code 1008 (policy violation).
//
// Thread contract: construct, start() and stop() on the control thread. The PipelineListener functions
// run on the analysis thread and only encode and post. The SourceListener functions run on a source's
// monitor thread and only post. Everything else runs on the server's one network thread.
// Beast lives in server.cpp only (it is slow to compile); this header does not include it.
#pragma once

#include <cstdint>
#include <filesystem>
#include <functional>
#include <memory>
#include <string>

#include "pitchwire/daemon/exercises.h"
#include "pitchwire/daemon/audio_source.h"
#include "pitchwire/daemon/pipeline.h"
#include "pitchwire/protocol/decode.h"
#include "pitchwire/protocol/messages.h"

namespace pitchwire::daemon {

struct ServerOptions {
  std::string bind = "127.0.0.1";
  int port = 0;                       // 0: the system picks a free port (see Server::port())
  std::filesystem::path web_root;     // folder served over HTTP
  int max_clients = 512;
  std::size_t max_message_bytes = protocol::kDefaultMaxMessageBytes;
  std::size_t queue_frames = 64;
  double slow_client_s = 10.0;
  double requests_per_s = 20.0;
  double request_burst = 40.0;
  std::string supervisor_token;       // hex; a connection that presents it is a supervisor
  std::string lab_token;              // hex; ... a lab client
  std::string observer_token;         // hex; ... an observer (used with require_token)
  bool require_token = false;         // every connection needs a token (a daemon listening beyond this
                                      // machine); any Host is then accepted, and an Origin must be the Host's
  std::vector<ExercisePreset> presets;  // the exercises start_exercise accepts, with the bands they set
  protocol::Hello hello;              // the greeting's fixed part (versions, audio format, hop, range)
  std::function<double()> audio_clock;  // seconds on the audio clock now (Pipeline::audio_time_s)
  // Called on the network thread with every band set after a set_band or clear_band (Pipeline::set_bands).
  std::function<void(std::vector<protocol::Band>)> on_bands;
  std::function<void(double reference_hz)> on_reference;  // network thread: set_reference was accepted
  // Called with every event sent to all connections, on the thread it arises on (network, analysis or a
  // source's monitor), before it is queued: the session record (Recorder::record_event, thread-safe).
  std::function<void(const protocol::Event&)> on_event_sent;
};

class Server final : public PipelineListener, public SourceListener {
 public:
  explicit Server(ServerOptions options);
  ~Server() override;
  Server(const Server&) = delete;
  Server& operator=(const Server&) = delete;

  // The audio format announced in `hello` (known once the source has started). Call before start().
  void set_audio_format(const protocol::AudioFormat& format);

  // Binds and starts accepting on the io thread(s). Throws std::runtime_error with one line naming the
  // address and the reason ("address already in use") when it cannot.
  void start();
  // Closes every connection with code 1001 (going away), stops accepting and joins the io threads.
  // Returns within about a second even when clients do not answer.
  void stop() noexcept;

  [[nodiscard]] int port() const;
  [[nodiscard]] std::size_t connections() const;
  // Set when the input has ended (a file replayed without loop) and every frame was queued.
  [[nodiscard]] bool input_ended() const;

  // PipelineListener (analysis thread).
  void on_live(const dsp::LiveFrame& frame) override;
  void on_settled(const dsp::SettledFrame& frame) override;
  void on_stats(const protocol::Stats& stats) override;
  void on_event(const protocol::Event& event) override;
  void on_end() override;

  // SourceListener (a source's monitor thread).
  void on_device_lost(const std::string& device, const std::string& reason) override;
  void on_device_back(const std::string& device) override;

  struct Impl;  // defined in server.cpp (public so that its connection classes can name it)

 private:
  std::shared_ptr<Impl> impl_;
};

// Constant-time comparison of a presented token with the expected one (no early exit on the first
// differing character, so response time does not tell how much of a guess was right).
[[nodiscard]] bool tokens_equal(std::string_view presented, std::string_view expected);

}  // namespace pitchwire::daemon
