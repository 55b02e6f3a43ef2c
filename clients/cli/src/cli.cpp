// cli.cpp: see cli.h.
#include "cli.h"

#include <CLI/CLI.hpp>

#include <csignal>
#include <cstdio>
#include <sstream>
#include <string>

#include "analyze.h"
#include "demo.h"
#include "live.h"
#include "report.h"
#include "pitchwire/dsp/pitch_tracker.h"

#ifndef PITCHWIRE_VERSION
#define PITCHWIRE_VERSION "unknown"
#endif

namespace pitchwire::cli {
namespace {

std::string number(double value) {
  std::ostringstream out;
  out << value;
  return out.str();
}

}  // namespace

int run(int argc, char** argv) {
  // A closed stdout shows up as EPIPE from write() and is handled there.
  std::signal(SIGPIPE, SIG_IGN);

  CLI::App app{"pitchwire: real-time pitch (F0) monitoring for voice sessions", "pitchwire"};
  app.set_version_flag("--version", std::string("pitchwire ") + PITCHWIRE_VERSION);
  app.require_subcommand(1);

  AnalyzeOptions analyze;
  CLI::App* analyze_cmd = app.add_subcommand(
      "analyze", "Track the pitch of a sound file and write one line per hop to stdout (CSV or JSON lines)");
  analyze_cmd
      ->add_option("FILE", analyze.path, "Sound file (WAV, FLAC, AIFF, Ogg and what else libsndfile reads)")
      ->required();
  std::string format = "csv";
  analyze_cmd->add_option("--format", format, "Output format: csv (default) or jsonl")
      ->check(CLI::IsMember({"csv", "jsonl"}));
  const dsp::TrackerConfig defaults;
  analyze_cmd->add_option("--hop-ms", analyze.hop_ms,
                          "Frame step in ms, 2.5 to 10 (default " + number(defaults.hop_ms) + ")");
  analyze_cmd->add_option("--f0-min", analyze.f0_min_hz,
                          "Lowest F0 searched, Hz (default " + number(defaults.f0_min_hz) + ")");
  analyze_cmd->add_option("--f0-max", analyze.f0_max_hz,
                          "Highest F0 searched, Hz (default " + number(defaults.f0_max_hz) + ")");
  analyze_cmd->add_option("--settle-ms", analyze.settle_ms,
                          "Delay of the settled value in ms, 0 to 500 (default " + number(defaults.settle_ms) +
                              ")");
  analyze_cmd->add_option("--channel", analyze.channel,
                          "Channel to analyse, from 1 (default: the mean of all channels)");
  bool no_hum_cancel = false;
  analyze_cmd->add_flag("--no-hum-cancel", no_hum_cancel, "Do not cancel 50/60 Hz mains hum");
  analyze_cmd->add_flag("--smooth", analyze.smooth,
                        "Add f0_smoothed_hz: brief dips next to consonants removed (running median in semitones)");
  analyze_cmd->add_option("--bridge-ms", analyze.bridge_ms,
                          "With --smooth: fill unvoiced gaps up to this long, marked in the bridged column "
                          "(default 0: never)");

  DemoOptions demo;
  CLI::App* demo_cmd =
      app.add_subcommand("demo", "Track the built-in test voice and print a summary of its pitch");
  demo_cmd->add_option("--csv", demo.csv_path, "Also write the settled frames to this CSV file");

  ReportOptions report;
  CLI::App* report_cmd = app.add_subcommand(
      "report", "Write a self-contained HTML report of a recorded session (docs/sessions.md, \"Report\")");
  report_cmd->add_option("SESSION_DIR", report.session_dir, "Session folder (holds session.jsonl)")->required();
  report_cmd->add_option("-o,--out", report.out_path,
                         "HTML file to write, mode 0600 (default: report.html in SESSION_DIR; replaced if present)");
  report_cmd
      ->add_option("--max-points", report.max_points,
                   "Most points of the F0 contour; longer sessions are reduced to medians of buckets of frames "
                   "(default " + std::to_string(report.max_points) + ")")
      ->check(CLI::Range(std::size_t{100}, std::size_t{1000000}));

  // The commands that talk to a running daemon.
  LiveOptions live;
  auto connection_options = [&live](CLI::App* cmd, bool timed) {
    cmd->add_option("--host", live.host, "Address of pitchwired (default 127.0.0.1)");
    cmd->add_option("--port", live.port, "Port of pitchwired (default 7350)")->check(CLI::Range(1, 65535));
    cmd->add_option("--token", live.token,
                    "Access token of a role (also PITCHWIRE_TOKEN); prefer --token-file, which stays out of the "
                    "process list");
    cmd->add_option("--token-file", live.token_file,
                    "File holding the token (the daemon writes supervisor.token and lab.token in its state "
                    "folder, ~/.local/state/pitchwire, where commands look by default)");
    if (timed) {
      cmd->add_option("--seconds", live.seconds, "Stop after this many seconds (default: at Ctrl-C)")
          ->check(CLI::PositiveNumber);
    }
  };
  WatchOptions watch;
  CLI::App* watch_cmd = app.add_subcommand("watch", "Show the live pitch: one line, or a small full-screen view");
  connection_options(watch_cmd, true);
  watch_cmd->add_flag("--full", watch.full, "A small full-screen view instead of one line");
  watch_cmd->add_flag("--no-color", watch.no_color, "No colour (also when NO_COLOR is set or TERM is dumb)");
  watch_cmd->add_option("--width", watch.width, "Columns to use (default: the terminal's)")->check(CLI::Range(10, 1000));

  TailOptions tail;
  CLI::App* tail_cmd =
      app.add_subcommand("tail", "Print the daemon's messages as JSON lines (default: events) for scripts");
  connection_options(tail_cmd, true);
  tail_cmd->add_flag("--frames", tail.frames, "Live frames (every hop)");
  tail_cmd->add_flag("--settled", tail.settled, "Settled frames");
  tail_cmd->add_flag("--stats", tail.stats, "Statistics");
  tail_cmd->add_flag("--events", tail.events, "Events (band crossings, markers, exercises, ...)");
  tail_cmd->add_option("--count", tail.count, "Stop after this many lines")->check(CLI::PositiveNumber);

  RequestOptions request;
  CLI::App* mark_cmd = app.add_subcommand("mark", "Add a marker (lab or supervisor token)");
  connection_options(mark_cmd, false);
  mark_cmd->add_option("LABEL", request.label, "The marker's label (one line)")->required();
  mark_cmd->add_option("--data", request.data, "A JSON object kept with the marker");
  CLI::App* band_cmd = app.add_subcommand(
      "band", "Set or clear a target band (supervisor): band set NAME LOW HIGH | band clear NAME");
  connection_options(band_cmd, false);
  band_cmd->add_option("WORDS", request.words, "set NAME LOW HIGH (Hz, note names such as A3, or semitones "
                                               "such as -2st) or clear NAME")
      ->required();
  CLI::App* exercise_cmd = app.add_subcommand(
      "exercise", "Start or end an exercise (supervisor): exercise start PRESET [--label TEXT] | exercise end");
  connection_options(exercise_cmd, false);
  exercise_cmd->add_option("WORDS", request.words, "start PRESET or end")->required();
  exercise_cmd->add_option("--label", request.label, "With start: a label of the exercise");
  CLI::App* reference_cmd =
      app.add_subcommand("reference", "Set the reference pitch (supervisor): Hz, a note name or semitones");
  connection_options(reference_cmd, false);
  reference_cmd->add_option("VALUE", request.words, "196, G3 or +2st")->required()->expected(1);

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // Help and version exit 0; every usage error exits 2 after CLI11's message.
    return app.exit(e) == 0 ? 0 : 2;
  }

  if (analyze_cmd->parsed()) {
    analyze.format = format == "jsonl" ? FrameFormat::kJsonl : FrameFormat::kCsv;
    analyze.hum_cancel = !no_hum_cancel;
    if (analyze.bridge_ms && !analyze.smooth) {
      std::fprintf(stderr, "pitchwire analyze: --bridge-ms needs --smooth (gaps are bridged only in the smoothed column)\n");
      return 2;
    }
    return run_analyze(analyze);
  }
  if (report_cmd->parsed()) return run_report(report);
  if (watch_cmd->parsed()) {
    watch.live = live;
    return run_watch(watch);
  }
  if (tail_cmd->parsed()) {
    tail.live = live;
    return run_tail(tail);
  }
  for (CLI::App* cmd : {mark_cmd, band_cmd, exercise_cmd, reference_cmd}) {
    if (cmd->parsed()) {
      request.live = live;
      request.command = cmd->get_name();
      return run_request(request);
    }
  }
  return run_demo(demo);
}

}  // namespace pitchwire::cli
