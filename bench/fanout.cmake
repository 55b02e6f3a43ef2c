# fanout_bench: the server's fan-out to many WebSocket subscribers on loopback, in one process (Beast
# client; a second Beast translation unit, built with the benchmarks only). Run: build/bench/fanout_bench
if(TARGET pitchwire::server)
  add_executable(fanout_bench ${CMAKE_CURRENT_LIST_DIR}/fanout_bench.cpp)
  target_link_libraries(fanout_bench PRIVATE pitchwire::server pitchwire_options)
endif()

# Functional check of the drop accounting with few clients (no timing bars): a client that stops reading
# loses frames, is told exactly how many, and nobody else loses any.
if(TARGET fanout_bench AND PITCHWIRE_BUILD_TESTS)
  add_test(NAME daemon.fanout_drop_accounting
           COMMAND fanout_bench --clients 16 --seconds 6 --stall-seconds 4 --check-accounting)
  set_tests_properties(daemon.fanout_drop_accounting PROPERTIES LABELS daemon TIMEOUT 120 RUN_SERIAL TRUE)
endif()
