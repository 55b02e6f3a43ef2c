# fanout_bench: the server's fan-out to many WebSocket subscribers on loopback, in one process (Beast
# client; a second Beast translation unit, built with the benchmarks only). Run: build/bench/fanout_bench
if(TARGET pitchwire::server)
  add_executable(fanout_bench ${CMAKE_CURRENT_LIST_DIR}/fanout_bench.cpp)
  target_link_libraries(fanout_bench PRIVATE pitchwire::server pitchwire_options)
endif()

# Functional check of the drop accounting with few clients (no timing bars): a client that stops reading
# loses frames, is told exactly how many, and nobody else loses any. Frames and settled corrections for 8 s
# (about 400 kB): with frames alone for 4 or 8 s the loopback buffers sometimes took everything and the
# check found nothing dropped (seen in about 1 run in 3).
if(TARGET fanout_bench AND PITCHWIRE_BUILD_TESTS)
  add_test(NAME daemon.fanout_drop_accounting
           COMMAND fanout_bench --clients 16 --seconds 10 --stall-seconds 8 --settled --check-accounting)
  set_tests_properties(daemon.fanout_drop_accounting PROPERTIES LABELS daemon TIMEOUT 120 RUN_SERIAL TRUE)
endif()
