// fanout_bench: how long the server's fan-out takes to bring one frame to many subscribers on loopback,
// and whether a client that stops reading changes anybody else's timing.
//
// In one process: the real pitchwired Server (daemon/src/server.cpp) bound to 127.0.0.1, a publisher
// thread that stands in for the analysis thread and calls Server::on_live/on_settled every hop (5 ms)
// with frames of a steady 196 Hz voice, and N WebSocket clients (Boost.Beast) that subscribe at full rate
// (and with --settled, settled corrections). The added delay of a frame at a client is the time from on_live() to the
// client's read completing (std::chrono::steady_clock, one clock for all). Printed: p50, p95, p99 and
// max delay over all clients and frames; the CPU time of the server's network thread and of the client
// threads (from /proc/self/task/*/stat) and the resident memory.
//
// Two phases: everyone reads; then the same with one extra client that subscribes and stops reading
// (its receive buffer set small) for `stall_s` seconds and then reads again. The second phase prints the
// others' delays again, the frames the stalled client lost (gaps in seq) and the count the server told
// it in dropped_frames events; they must agree.
//
// Usage: fanout_bench [--clients N] [--seconds S] [--stall-seconds S] [--settled] [--check | --check-accounting]
//   --settled: subscribe to settled corrections too (twice the messages; the default is frames at every hop)
//   --check: exit 1 unless p99 <= 5 ms in both phases, no reading client lost a frame, and the stalled
//   client's reported drops equal its seq gaps (the bar of the daemon's acceptance tests).
//   --check-accounting: the same without the delay bars (a functional test that CI runs with few clients:
//   timing on a shared CI machine is no measurement).
#include <pthread.h>
#include <sys/resource.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <charconv>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <map>
#include <mutex>
#include <string>
#include <sstream>
#include <thread>
#include <utility>  // before Boost.Asio 1.74, whose awaitable.hpp uses std::exchange without it
#include <vector>

#include <boost/asio.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/websocket.hpp>

#include "pitchwire/daemon/server.h"

namespace beast = boost::beast;
namespace websocket = beast::websocket;
namespace net = boost::asio;
using tcp = net::ip::tcp;
using Clock = std::chrono::steady_clock;

namespace {

constexpr double kHopMs = 5.0;
constexpr std::size_t kMaxFrames = 1 << 16;

bool g_settled = false;  // subscribe to settled corrections too (twice the messages)

// Publish time of each frame index (written by the publisher before on_live, read by clients after).
std::vector<std::atomic<std::int64_t>> g_publish_ns(kMaxFrames);

std::int64_t now_ns() {
  return std::chrono::duration_cast<std::chrono::nanoseconds>(Clock::now().time_since_epoch()).count();
}

// The integer after `"key":` in a JSON text (the server writes compact JSON), or -1.
std::int64_t int_field(std::string_view text, std::string_view key) {
  const auto pos = text.find(key);
  if (pos == std::string_view::npos) return -1;
  std::int64_t v = -1;
  const char* first = text.data() + pos + key.size();
  std::from_chars(first, text.data() + text.size(), v);
  return v;
}

struct ClientStats {
  std::vector<std::int64_t> delays_ns;  // frames only
  std::int64_t frames = 0, settled = 0, seq_gaps = 0, reported_drops = 0, last_seq = 0;
  bool closed = false;
  std::string close_reason;
};

class Client : public std::enable_shared_from_this<Client> {
 public:
  Client(net::io_context& ioc, int port, bool stall, double stall_s, std::atomic<int>& ready)
      : ws_(ioc), port_(port), stall_(stall), stall_s_(stall_s), ready_(ready),
        timer_(ws_.get_executor()) {}

  void start() {
    auto& socket = beast::get_lowest_layer(ws_);
    socket.open(tcp::v4());
    if (stall_) socket.set_option(net::socket_base::receive_buffer_size(4096));  // make the stall bite
    socket.async_connect(tcp::endpoint(net::ip::make_address("127.0.0.1"), static_cast<unsigned short>(port_)),
                                               [self = shared_from_this()](beast::error_code ec) { self->on_connect(ec); });
  }

  ClientStats stats;
  std::atomic<bool> measuring{false};

 private:
  void on_connect(beast::error_code ec) {
    if (ec) return fail("connect", ec);
    ws_.set_option(websocket::stream_base::decorator([](websocket::request_type& req) {
      req.set(beast::http::field::sec_websocket_protocol, "pitchwire.v1");
    }));
    ws_.async_handshake("127.0.0.1:" + std::to_string(port_), "/ws",
                        [self = shared_from_this()](beast::error_code e) { self->on_handshake(e); });
  }

  void on_handshake(beast::error_code ec) {
    if (ec) return fail("handshake", ec);
    ws_.text(true);
    request_ = g_settled ? R"({"type":"subscribe","id":"s","settled":true})" : R"({"type":"subscribe","id":"s"})";
    ws_.async_write(net::buffer(request_), [self = shared_from_this()](beast::error_code e, std::size_t) {
      if (e) return self->fail("subscribe", e);
      self->ready_.fetch_add(1);
      if (self->stall_) {
        self->timer_.expires_after(std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(self->stall_s_)));
        self->timer_.async_wait([self](beast::error_code) { self->read(); });
      } else {
        self->read();
      }
    });
  }

  void read() {
    ws_.async_read(buffer_, [self = shared_from_this()](beast::error_code ec, std::size_t) { self->on_read(ec); });
  }

  void on_read(beast::error_code ec) {
    const std::int64_t t = now_ns();
    if (ec) {
      stats.closed = true;
      if (ec == websocket::error::closed) stats.close_reason = std::string(ws_.reason().reason.c_str());
      return;
    }
    const auto data = buffer_.cdata();
    const std::string_view text(static_cast<const char*>(data.data()), data.size());
    const std::int64_t seq = int_field(text, "\"seq\":");
    if (stats.last_seq > 0 && seq > stats.last_seq + 1) stats.seq_gaps += seq - stats.last_seq - 1;
    stats.last_seq = seq;
    if (text.starts_with(R"({"type":"frame")")) {
      ++stats.frames;
      const std::int64_t index = int_field(text, "\"index\":");
      if (measuring.load(std::memory_order_relaxed) && index >= 0 && static_cast<std::size_t>(index) < kMaxFrames) {
        stats.delays_ns.push_back(t - g_publish_ns[static_cast<std::size_t>(index)].load(std::memory_order_acquire));
      }
    } else if (text.starts_with(R"({"type":"settled")")) {
      ++stats.settled;
    } else if (text.find(R"("kind":"dropped_frames")") != std::string_view::npos) {
      stats.reported_drops += int_field(text, "\"count\":");
    }
    buffer_.consume(buffer_.size());
    read();
  }

  void fail(const char* what, beast::error_code ec) {
    std::cerr << "fanout_bench: client " << what << ": " << ec.message() << "\n";
    stats.closed = true;
    ready_.fetch_add(1);
  }

  websocket::stream<tcp::socket> ws_;
  int port_;
  bool stall_;
  double stall_s_;
  std::atomic<int>& ready_;
  net::steady_timer timer_;
  beast::flat_buffer buffer_;
  std::string request_;
};

// CPU seconds used so far by this process's threads whose name starts with `prefix`.
double thread_cpu_s(std::string_view prefix) {
  double total = 0.0;
  const long ticks = sysconf(_SC_CLK_TCK);
  for (const auto& entry : std::filesystem::directory_iterator("/proc/self/task")) {
    std::ifstream comm(entry.path() / "comm");
    std::string name;
    std::getline(comm, name);
    if (!name.starts_with(prefix)) continue;
    std::ifstream stat(entry.path() / "stat");
    std::string line;
    std::getline(stat, line);
    // Fields after the ")" that ends the name: state is field 3; utime and stime are fields 14 and 15.
    std::istringstream rest(line.substr(line.rfind(')') + 2));
    std::string field;
    long utime = 0, stime = 0;
    for (int i = 3; i <= 15 && rest >> field; ++i) {
      if (i == 14) utime = std::stol(field);
      if (i == 15) stime = std::stol(field);
    }
    total += static_cast<double>(utime + stime) / static_cast<double>(ticks);
  }
  return total;
}

double rss_mb() {
  std::ifstream status("/proc/self/status");
  std::string line;
  while (std::getline(status, line)) {
    if (line.starts_with("VmRSS:")) return std::stod(line.substr(6)) / 1024.0;
  }
  return 0.0;
}

double percentile(std::vector<std::int64_t>& v, double p) {
  if (v.empty()) return 0.0;
  const auto k = static_cast<std::size_t>(p * static_cast<double>(v.size() - 1));
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(k), v.end());
  return static_cast<double>(v[k]) / 1e6;
}

struct PhaseResult {
  double p50 = 0, p95 = 0, p99 = 0, max = 0;
  std::int64_t frames = 0, lost_by_readers = 0;
  double net_cpu_pct = 0, client_cpu_pct = 0, rss = 0;
  std::int64_t stalled_gaps = -1, stalled_reported = -1;
  bool stalled_closed = false;
};

PhaseResult run_phase(int clients, double seconds, bool with_stall, double stall_s, std::int64_t& next_index) {
  pitchwire::daemon::ServerOptions options;
  options.port = 0;
  options.max_clients = clients + 8;
  options.web_root = std::filesystem::temp_directory_path();
  options.hello.server_version = "bench";
  options.hello.hop_ms = kHopMs;
  options.audio_clock = [] { return 0.0; };
  pitchwire::daemon::Server server(options);
  server.set_audio_format({16000.0, 1});
  server.start();

  net::io_context client_ioc;
  std::atomic<int> ready{0};
  std::vector<std::shared_ptr<Client>> all;
  for (int i = 0; i < clients; ++i) all.push_back(std::make_shared<Client>(client_ioc, server.port(), false, 0.0, ready));
  std::shared_ptr<Client> stalled;
  if (with_stall) {
    stalled = std::make_shared<Client>(client_ioc, server.port(), true, stall_s, ready);
  }
  for (auto& c : all) c->start();
  if (stalled) stalled->start();
  std::thread client_thread([&] {
    pthread_setname_np(pthread_self(), "bench-clients");
    auto guard = net::make_work_guard(client_ioc);
    client_ioc.run();
  });
  const int expected = clients + (stalled ? 1 : 0);
  const auto deadline = Clock::now() + std::chrono::seconds(30);
  while (ready.load() < expected && Clock::now() < deadline) std::this_thread::sleep_for(std::chrono::milliseconds(10));
  if (ready.load() < expected) {
    std::cerr << "fanout_bench: only " << ready.load() << " of " << expected << " clients subscribed\n";
  }
  // Let the subscriptions reach the server before measuring.
  std::this_thread::sleep_for(std::chrono::milliseconds(300));
  for (auto& c : all) c->measuring.store(true);

  const double net_cpu0 = thread_cpu_s("pw-net"), client_cpu0 = thread_cpu_s("bench-clients");
  const auto t0 = Clock::now();
  const auto hops = static_cast<std::int64_t>(seconds * 1000.0 / kHopMs);
  const std::int64_t first_index = next_index;
  for (std::int64_t h = 0; h < hops; ++h) {
    std::this_thread::sleep_until(t0 + std::chrono::microseconds(static_cast<std::int64_t>(static_cast<double>(h) * kHopMs * 1000.0)));
    pitchwire::dsp::LiveFrame live;
    live.index = next_index++;
    live.time_s = static_cast<double>(live.index) * kHopMs / 1000.0;
    live.f0_hz = 196.0f;
    live.voicing = 0.99f;
    live.confidence = 0.95f;
    live.level_dbfs = -20.0f;
    g_publish_ns[static_cast<std::size_t>(live.index) % kMaxFrames].store(now_ns(), std::memory_order_release);
    server.on_live(live);
    if (live.index >= 12) {
      pitchwire::dsp::SettledFrame settled;
      settled.index = live.index - 12;
      settled.time_s = static_cast<double>(settled.index) * kHopMs / 1000.0;
      settled.f0_hz = 196.0f;
      settled.live_f0_hz = 196.0f;
      server.on_settled(settled);
    }
  }
  // Let the last frames arrive.
  std::this_thread::sleep_for(std::chrono::milliseconds(with_stall ? 1500 : 300));
  const double wall = std::chrono::duration<double>(Clock::now() - t0).count();
  PhaseResult r;
  r.net_cpu_pct = 100.0 * (thread_cpu_s("pw-net") - net_cpu0) / wall;
  r.client_cpu_pct = 100.0 * (thread_cpu_s("bench-clients") - client_cpu0) / wall;
  r.rss = rss_mb();
  client_ioc.stop();
  client_thread.join();
  server.stop();

  std::vector<std::int64_t> delays;
  for (auto& c : all) {
    delays.insert(delays.end(), c->stats.delays_ns.begin(), c->stats.delays_ns.end());
    r.lost_by_readers += c->stats.seq_gaps + std::max<std::int64_t>(0, hops - c->stats.frames);
  }
  r.frames = static_cast<std::int64_t>(delays.size());
  r.p50 = percentile(delays, 0.50);
  r.p95 = percentile(delays, 0.95);
  r.p99 = percentile(delays, 0.99);
  r.max = delays.empty() ? 0.0 : static_cast<double>(*std::max_element(delays.begin(), delays.end())) / 1e6;
  if (stalled) {
    r.stalled_gaps = stalled->stats.seq_gaps;
    r.stalled_reported = stalled->stats.reported_drops;
    r.stalled_closed = stalled->stats.closed;
  }
  (void)first_index;
  return r;
}

void print(const char* name, const PhaseResult& r, int clients) {
  std::printf("%-28s clients %4d  frames %8lld  delay ms p50 %6.3f  p95 %6.3f  p99 %6.3f  max %7.3f  lost %lld  "
              "CPU %% net %5.1f clients %5.1f  RSS %.1f MB\n",
              name, clients, static_cast<long long>(r.frames), r.p50, r.p95, r.p99, r.max,
              static_cast<long long>(r.lost_by_readers), r.net_cpu_pct, r.client_cpu_pct, r.rss);
}

}  // namespace

int main(int argc, char** argv) {
  int clients = 256;
  double seconds = 10.0, stall_s = 4.0;
  bool check = false, check_accounting = false;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto next = [&]() -> std::string {
      if (i + 1 >= argc) {
        std::cerr << "fanout_bench: " << a << " needs a value\n";
        std::exit(2);
      }
      return argv[++i];
    };
    if (a == "--clients") clients = std::stoi(next());
    else if (a == "--seconds") seconds = std::stod(next());
    else if (a == "--stall-seconds") stall_s = std::stod(next());
    else if (a == "--check") check = true;
    else if (a == "--check-accounting") check_accounting = true;
    else if (a == "--settled") g_settled = true;
    else {
      std::cerr << "usage: fanout_bench [--clients N] [--seconds S] [--stall-seconds S] [--settled] [--check | --check-accounting]\n";
      return 2;
    }
  }
  // 256 clients and the server's sockets need more descriptors than the usual 1024 soft limit allows
  // comfortably; raise it to the hard limit.
  rlimit lim{};
  if (getrlimit(RLIMIT_NOFILE, &lim) == 0) {
    lim.rlim_cur = lim.rlim_max;
    setrlimit(RLIMIT_NOFILE, &lim);
  }
  std::int64_t index = 0;
  const PhaseResult a = run_phase(clients, seconds, false, 0.0, index);
  print("all clients reading", a, clients);
  const PhaseResult b = run_phase(clients, seconds, true, stall_s, index);
  print("one client stalled", b, clients);
  std::printf("stalled client: stopped reading for %.1f s; frames lost (seq gaps) %lld, reported in dropped_frames %lld%s\n",
              stall_s, static_cast<long long>(b.stalled_gaps), static_cast<long long>(b.stalled_reported),
              b.stalled_closed ? ", then closed" : "");
  if (check || check_accounting) {
    bool ok = true;
    auto fail = [&](const std::string& why) {
      std::printf("FAIL: %s\n", why.c_str());
      ok = false;
    };
    if (check && a.p99 > 5.0) fail("p99 added delay above 5 ms with every client reading");
    if (check && b.p99 > 5.0) fail("p99 added delay above 5 ms with one client stalled");
    if (a.lost_by_readers != 0 || b.lost_by_readers != 0) fail("a client that kept reading lost frames");
    if (b.stalled_gaps <= 0) fail("the stalled client lost nothing: the stall did not fill its queue");
    if (b.stalled_gaps != b.stalled_reported) fail("the stalled client's drops were not all reported");
    std::printf(ok ? "PASS\n" : "");
    return ok ? 0 : 1;
  }
  return 0;
}
