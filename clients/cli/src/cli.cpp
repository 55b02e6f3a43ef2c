// cli.cpp: see cli.h.
#include "cli.h"

#include <CLI/CLI.hpp>

#include <csignal>
#include <cstdio>
#include <sstream>
#include <string>

#include "analyze.h"
#include "demo.h"
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
  return run_demo(demo);
}

}  // namespace pitchwire::cli
