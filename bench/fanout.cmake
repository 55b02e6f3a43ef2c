# fanout_bench: the server's fan-out to many WebSocket subscribers on loopback, in one process (Beast
# client; a second Beast translation unit, built with the benchmarks only). Run: build/bench/fanout_bench
if(TARGET pitchwire::server)
  add_executable(fanout_bench ${CMAKE_CURRENT_LIST_DIR}/fanout_bench.cpp)
  target_link_libraries(fanout_bench PRIVATE pitchwire::server pitchwire_options)
endif()
