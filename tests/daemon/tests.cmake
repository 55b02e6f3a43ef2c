# tests/daemon: the daemon's parts without the network (ring, sources, configuration, pipeline), and the
# server and end-to-end tests that start pitchwired (and, for device capture, a JACK server of their own).
file(GLOB PITCHWIRE_DAEMON_TEST_SOURCES CONFIGURE_DEPENDS ${CMAKE_CURRENT_LIST_DIR}/test_*.cpp)
add_executable(pitchwire_daemon_tests ${PITCHWIRE_DAEMON_TEST_SOURCES} ${CMAKE_CURRENT_LIST_DIR}/../clients/test_audio.cpp)
target_include_directories(pitchwire_daemon_tests PRIVATE ${CMAKE_CURRENT_LIST_DIR}/../clients)
target_link_libraries(pitchwire_daemon_tests PRIVATE pitchwire::daemon_core PkgConfig::SNDFILE pitchwire_options GTest::gtest_main)
target_compile_definitions(pitchwire_daemon_tests PRIVATE PITCHWIRE_SOURCE_DIR="${PROJECT_SOURCE_DIR}")
gtest_discover_tests(pitchwire_daemon_tests DISCOVERY_TIMEOUT 60 PROPERTIES LABELS daemon)
# tests/daemon/test_device_source.cpp plays into JACK through the JACK C API (tests/daemon/jack_fixture.h).
target_link_libraries(pitchwire_daemon_tests PRIVATE jack)
