// live.h: the terminal commands that talk to a running pitchwired over protocol v1 (docs/protocol.md):
// `watch` (a live line or a small full-screen view), `tail` (messages as JSON lines for scripts), `mark`
// (a marker, lab or supervisor) and the supervisor's `band`, `exercise` and `reference`.
#pragma once

#include <optional>
#include <string>
#include <vector>

namespace pitchwire::cli {

// Where the daemon is and who we are.
struct LiveOptions {
  std::string host = "127.0.0.1";
  int port = 7350;
  std::string token;       // --token (or the PITCHWIRE_TOKEN environment variable)
  std::string token_file;  // --token-file; else, for commands that need a role, the daemon's default file
  std::optional<double> seconds;  // watch and tail: stop after this long (default: until Ctrl-C)
};

struct WatchOptions {
  LiveOptions live;
  bool full = false;      // the small full-screen view instead of one line
  bool no_color = false;  // also off when NO_COLOR is set, TERM is dumb or stdout is not a terminal
  std::optional<int> width;  // default: the terminal's (80 when unknown)
};

struct TailOptions {
  LiveOptions live;
  bool frames = false, settled = false, stats = false, events = false;  // none given: events
  std::optional<long> count;  // stop after this many lines
};

// A request of a role: the words after the command name (`band set target 165 220`).
struct RequestOptions {
  LiveOptions live;
  std::string command;            // "band", "exercise", "reference", "mark"
  std::vector<std::string> words;  // the rest
  std::string label;               // exercise start --label, mark LABEL
  std::string data;                // mark --data JSON
};

// Exit codes: 0 done; 1 the daemon is absent, refused us or the connection broke; 2 usage error; 3 the daemon
// answered the request with an error (printed with its code).
int run_watch(const WatchOptions& options);
int run_tail(const TailOptions& options);
int run_request(const RequestOptions& options);

}  // namespace pitchwire::cli
