// recorder.h: the session record. One folder per daemon run under the sessions folder (mode 0700, files
// 0600): an append-only JSON-lines log of settled frames, statistics and events, a CSV of the frames for
// spreadsheets, a file per exercise with its summary, a summary written when the session ends, and, only
// when asked for with the speaker's consent, the input audio as WAV (docs/sessions.md).
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
#include <span>
#include <string>
#include <thread>
#include <vector>

#include <sndfile.h>

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
  bool record_audio = false;           // keep the input as audio.wav (the caller has checked consent)
  double sample_rate_hz = 48000.0;     // of the input, for audio.wav
  double audio_queue_s = 10.0;         // audio waiting for the disk before new samples are counted and lost
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
  // The input's sample rate, when it is known only once the source has started; call before start().
  void set_sample_rate(double hz) { options_.sample_rate_hz = hz; }
  // Writes what is queued, the summary (closed "stopped") and closes the files. Within a second unless the
  // disk itself hangs.
  void stop() noexcept;

  // Any thread; never blocks on the disk.
  void record_settled(const dsp::SettledFrame& frame);
  void record_stats(const protocol::Stats& stats);
  void record_event(const protocol::Event& event);
  // The input audio, in order, when record_audio is set (else ignored). Samples that do not fit in the
  // queue are counted and written as silence later, so that audio.wav stays on the audio clock.
  void record_audio(std::span<const float> samples);

  [[nodiscard]] std::filesystem::path folder() const { return folder_; }
  [[nodiscard]] std::int64_t lines_dropped() const { return dropped_.load(); }
  [[nodiscard]] std::int64_t lines_written() const { return written_.load(); }
  [[nodiscard]] std::int64_t audio_samples_lost() const { return audio_lost_.load(); }

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
  // Recorder thread: the audio file, with a failure state and retries of its own.
  bool open_audio(std::string& failed);
  bool write_audio(const std::vector<float>& samples, std::int64_t owed_after, std::string& failed);
  void keep_audio(const std::vector<float>& audio, std::int64_t owed_after, bool flush, bool stopping);
  void close_audio() noexcept;
  void problem(const std::string& what);

  RecorderOptions options_;
  std::function<void(const std::string& message, bool resolved)> on_problem_;
  std::filesystem::path folder_;
  std::string started_wall_;
  std::FILE* log_ = nullptr;
  std::FILE* csv_ = nullptr;
  SNDFILE* audio_ = nullptr;            // audio.wav, when record_audio (recorder thread)
  int audio_fd_ = -1;                   // its descriptor (libsndfile does not own it)
  std::int64_t audio_frames_ = 0;       // frames in audio.wav
  bool audio_failing_ = false;          // a problem with audio.wav was reported and has not cleared
  bool audio_full_ = false;             // audio.wav reached WAV's size limit: no more audio is kept
  std::chrono::steady_clock::time_point audio_last_try_{};
  bool failing_ = false;  // a problem was reported and has not cleared yet (recorder thread)

  std::mutex mutex_;
  std::condition_variable wake_;
  std::deque<std::string> queue_;
  std::deque<std::string> csv_queue_;
  std::deque<std::pair<std::string, std::string>> files_;  // whole files to write: name, content
  std::vector<float> audio_queue_;
  std::size_t audio_queue_max_ = 0;
  bool audio_dropping_ = false;        // a chunk was lost: lose the rest until the queue is taken (order)
  std::int64_t audio_silence_ = 0;     // samples lost since the queue was last taken (under mutex_)
  std::int64_t audio_owed_ = 0;        // lost samples not yet written as silence (recorder thread)
  std::atomic<std::int64_t> audio_lost_{0};
  int exercises_ended_ = 0;
  bool stop_requested_ = false;
  std::atomic<std::int64_t> dropped_{0}, written_{0};
  std::int64_t dropped_reported_ = 0;  // lost lines a gap line on disk has told of (recorder thread)
  std::int64_t unflushed_ = 0;         // lines written since the last successful flush (recorder thread)
  SessionSummary summary_;  // under mutex_
  std::thread thread_;
};

}  // namespace pitchwire::daemon
