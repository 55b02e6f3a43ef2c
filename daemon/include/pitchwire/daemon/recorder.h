// recorder.h: the session record. One folder per daemon run under the sessions folder (mode 0700, files
// 0600): an append-only JSON-lines log of settled frames, statistics and events, a CSV of the frames for
// spreadsheets, a file per exercise with its summary, and a summary written when the session ends
// (docs/sessions.md).
//
// Thread contract: construct, start() and stop() on the control thread. record_*() may be called from any
// thread (the analysis thread for frames and statistics, the network thread for band changes, markers and
// exercises); they format the line and append it to a bounded queue under a mutex held for the append only,
// and never touch the disk. The recorder's own thread (`pw-recorder`) writes the queue out and flushes the
// files at least once a second (fflush and fdatasync), so that a SIGKILL loses at most the last second.
// A write that fails (disk full, folder unwritable) is reported once through on_problem (on the recorder's
// thread, resolved = false), retried every few seconds, and reported again when it works (resolved = true); the live stream never waits for the disk. Lines that do not fit in
// the queue are counted and the count is written into the log when writing works again.
#pragma once

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdint>
#include <cstdio>
#include <deque>
#include <filesystem>
#include <functional>
#include <mutex>
#include <optional>
#include <string>
#include <thread>
#include <vector>

#include "pitchwire/dsp/pitch_tracker.h"
#include "pitchwire/protocol/messages.h"

namespace pitchwire::daemon {

// UTC wall clock as the session record and markers write it: ISO 8601 with milliseconds
// ("2026-12-02T10:15:00.250Z"), or with `compact` the folder-name form ("20261202T101500Z").
[[nodiscard]] std::string utc_wall_clock(std::chrono::system_clock::time_point when, bool compact = false);

struct RecorderOptions {
  std::filesystem::path sessions_dir;  // parent of the session folders (created 0700 when missing)
  std::string source;                  // what is recorded ("demo", "device:jack/...")
  double hop_ms = 5.0;
  double flush_interval_s = 1.0;       // flush and fdatasync at least this often
  std::size_t queue_lines = 1 << 16;   // lines waiting for the disk before new ones are counted and dropped
};

// Running totals of a session, from its frames and events; the same code sums a live session and reads an
// unfinished one back (close_unfinished).
class SessionSummary {
 public:
  void add_frame(double time_s, std::optional<double> f0_hz, double hop_s);
  void add_event(std::string_view kind);
  void set_last_time(double time_s) { last_time_s_ = std::max(last_time_s_, time_s); }
  [[nodiscard]] std::string to_json(std::string_view closed_how, std::string_view ended_wall,
                                    std::string_view started_wall) const;
  [[nodiscard]] std::int64_t frames() const { return frames_; }

 private:
  std::int64_t frames_ = 0, voiced_frames_ = 0, markers_ = 0, exercises_ = 0, problems_ = 0;
  double voiced_s_ = 0.0, last_time_s_ = 0.0;
  std::vector<double> f0s_;  // voiced settled F0, for the median and the p5-p95 range
};

class Recorder {
 public:
  Recorder(RecorderOptions options, std::function<void(const std::string& message, bool resolved)> on_problem);
  ~Recorder();
  Recorder(const Recorder&) = delete;
  Recorder& operator=(const Recorder&) = delete;

  // Creates the session folder and starts the writing thread. A folder that cannot be made is a problem
  // (reported, retried), not an exception: the daemon runs on without a record.
  void start();
  // Writes what is queued, the summary (closed "stopped") and closes the files. Within a second unless the
  // disk itself hangs.
  void stop() noexcept;

  // Any thread; never blocks on the disk.
  void record_settled(const dsp::SettledFrame& frame);
  void record_stats(const protocol::Stats& stats);
  void record_event(const protocol::Event& event);

  [[nodiscard]] std::filesystem::path folder() const { return folder_; }
  [[nodiscard]] std::int64_t lines_dropped() const { return dropped_.load(); }
  [[nodiscard]] std::int64_t lines_written() const { return written_.load(); }

  // Session folders under sessions_dir without a summary (the daemon was killed): each gets its summary
  // (closed "recovered"), read back from its log; a torn last line is left out. Returns the folders closed.
  static std::vector<std::filesystem::path> close_unfinished(const std::filesystem::path& sessions_dir);

 private:
  void push(std::string line, bool droppable);
  void run();
  bool open_files();
  bool write_out(std::deque<std::string>& lines);
  bool flush_files();
  void close_files() noexcept;
  void problem(const std::string& what);

  RecorderOptions options_;
  std::function<void(const std::string& message, bool resolved)> on_problem_;
  std::filesystem::path folder_;
  std::string started_wall_;
  std::FILE* log_ = nullptr;
  std::FILE* csv_ = nullptr;
  bool failing_ = false;  // a problem was reported and has not cleared yet (recorder thread)

  std::mutex mutex_;
  std::condition_variable wake_;
  std::deque<std::string> queue_;
  std::deque<std::string> csv_queue_;
  std::deque<std::pair<std::string, std::string>> files_;  // whole files to write: name, content
  int exercises_ended_ = 0;
  bool stop_requested_ = false;
  std::atomic<std::int64_t> dropped_{0}, written_{0};
  std::int64_t dropped_reported_ = 0;  // lost lines a gap line on disk has told of (recorder thread)
  std::int64_t unflushed_ = 0;         // lines written since the last successful flush (recorder thread)
  SessionSummary summary_;  // under mutex_
  std::thread thread_;
};

}  // namespace pitchwire::daemon
