# bench_tracker: per-hop cost of PitchTracker::process at 16, 44.1 and 48 kHz (Google Benchmark).
# Run: build/bench/bench_tracker  (see bench/README.md). The whole-program comparison against the reference
# trackers is bench/speed.py.
if(TARGET pitchwire::dsp)
  find_package(benchmark REQUIRED)
  add_executable(bench_tracker ${CMAKE_CURRENT_LIST_DIR}/bench_tracker.cpp)
  target_link_libraries(bench_tracker PRIVATE pitchwire::dsp pitchwire_options benchmark::benchmark)
endif()

# step_latency: the estimator's share of the live latency on F0 steps (no sound server, no network).
# Run: build/bench/step_latency  (the latency through JACK is tests/daemon/jack_live.py latency).
if(TARGET pitchwire::dsp)
  add_executable(step_latency ${CMAKE_CURRENT_LIST_DIR}/step_latency.cpp)
  target_link_libraries(step_latency PRIVATE pitchwire::dsp pitchwire_options)
endif()
