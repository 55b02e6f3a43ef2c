# tests/daemon: the daemon's parts without the network (ring, sources, configuration, pipeline), and the
# server and end-to-end tests that start pitchwired (and, for device capture, a JACK server of their own).
file(GLOB PITCHWIRE_DAEMON_TEST_SOURCES CONFIGURE_DEPENDS ${CMAKE_CURRENT_LIST_DIR}/test_*.cpp)
add_executable(pitchwire_daemon_tests ${PITCHWIRE_DAEMON_TEST_SOURCES} ${CMAKE_CURRENT_LIST_DIR}/../clients/test_audio.cpp)
target_include_directories(pitchwire_daemon_tests PRIVATE ${CMAKE_CURRENT_LIST_DIR}/../clients)
target_link_libraries(pitchwire_daemon_tests PRIVATE pitchwire::daemon_core PkgConfig::SNDFILE pitchwire_options GTest::gtest_main)
target_compile_definitions(pitchwire_daemon_tests PRIVATE PITCHWIRE_SOURCE_DIR="${PROJECT_SOURCE_DIR}")
# LD_BIND_NOW: when a JACK server shuts a client down, RtAudio 5.2 starts a thread that closes the client
# (libjack then cancels its own client thread, asynchronously) and meanwhile writes a message to std::cerr on
# that very thread; a cancellation that lands inside a lazy symbol lookup of that write unwinds through a
# noexcept frame and aborts the process (2 aborts in 38 runs of the JACK shutdown test, none in 45 with it; core dump:
# _dl_fixup under std::uncaught_exception). Binding every symbol at start leaves no lookup to land in.
gtest_discover_tests(pitchwire_daemon_tests DISCOVERY_TIMEOUT 60 PROPERTIES LABELS daemon ENVIRONMENT LD_BIND_NOW=1)
# tests/daemon/test_device_source.cpp plays into JACK through the JACK C API (tests/daemon/jack_fixture.h).
target_link_libraries(pitchwire_daemon_tests PRIVATE jack)

# pitchwire_jack_player: a JACK client that plays a vowel of known F0 (or F0 steps with their times), for the
# end-to-end test and the latency benchmark of tests/daemon/jack_live.py.
add_executable(pitchwire_jack_player ${CMAKE_CURRENT_LIST_DIR}/jack_voice_player.cpp)
target_link_libraries(pitchwire_jack_player PRIVATE pitchwire::dsp jack pitchwire_options)

# End to end through a JACK server (dummy driver) started by the test: the player's vowel, captured by
# pitchwired --input device:jack/..., reaches a WebSocket client with the F0 it was played at.
pitchwire_find_python(PITCHWIRE_PYTHON_WS "websockets, jsonschema" "python3-websockets python3-jsonschema"
                      "the daemon's live tests")
add_test(NAME daemon.jack_end_to_end
         COMMAND ${PITCHWIRE_PYTHON_WS} ${CMAKE_CURRENT_LIST_DIR}/jack_live.py check
                 $<TARGET_FILE:pitchwired> $<TARGET_FILE:pitchwire_jack_player>)
set_tests_properties(daemon.jack_end_to_end PROPERTIES LABELS daemon TIMEOUT 120 RUN_SERIAL TRUE)

# The server against a real C++ WebSocket client (Beast) in one process: greeting, rates, settled corrections,
# every kind of bad input, roles, handshake checks, shutdown. Its own executable: Beast is slow to compile,
# and this keeps it out of pitchwire_daemon_tests.
add_executable(pitchwire_server_client_tests ${CMAKE_CURRENT_LIST_DIR}/server_client_test.cpp)
target_link_libraries(pitchwire_server_client_tests PRIVATE pitchwire::server pitchwire_options GTest::gtest_main)
gtest_discover_tests(pitchwire_server_client_tests DISCOVERY_TIMEOUT 60 PROPERTIES LABELS daemon)
include(${CMAKE_CURRENT_LIST_DIR}/protocol_live.cmake)

# The session record through a running daemon: SIGKILL mid-session loses at most a second of frames, and the
# next start closes the killed session from its log (session_record_test.py).
add_test(NAME daemon.session_record
         COMMAND ${PITCHWIRE_PYTHON_WS} ${CMAKE_CURRENT_LIST_DIR}/session_record_test.py --daemon $<TARGET_FILE:pitchwired>)
set_tests_properties(daemon.session_record PROPERTIES LABELS daemon TIMEOUT 120)

# A supervised exercise end to end on a tone of known pitch and level: calibrated level, doses and their limit,
# the preset's band around the reference, the exercise summary and its file (exercise_e2e_test.py).
add_test(NAME daemon.exercise_e2e
         COMMAND ${PITCHWIRE_PYTHON_WS} ${CMAKE_CURRENT_LIST_DIR}/exercise_e2e_test.py --daemon $<TARGET_FILE:pitchwired>)
set_tests_properties(daemon.exercise_e2e PROPERTIES LABELS daemon TIMEOUT 120 ENVIRONMENT LD_BIND_NOW=1)
