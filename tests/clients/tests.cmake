# Tests of the `pitchwire` command (clients/cli): the file front end in-process, and the real
# executable run on files the tests write. Included by tests/CMakeLists.txt.
find_package(nlohmann_json 3 REQUIRED)

add_library(pitchwire_test_audio STATIC ${CMAKE_CURRENT_LIST_DIR}/test_audio.cpp)
target_include_directories(pitchwire_test_audio PUBLIC ${CMAKE_CURRENT_LIST_DIR})
target_link_libraries(pitchwire_test_audio PUBLIC PkgConfig::SNDFILE PRIVATE pitchwire_options)

add_executable(pitchwire_audiofile_tests ${CMAKE_CURRENT_LIST_DIR}/audio_file_test.cpp)
target_link_libraries(pitchwire_audiofile_tests PRIVATE
  pitchwire::audiofile pitchwire_test_audio pitchwire_options GTest::gtest_main)
gtest_discover_tests(pitchwire_audiofile_tests DISCOVERY_TIMEOUT 60)

add_executable(pitchwire_cli_tests ${CMAKE_CURRENT_LIST_DIR}/cli_test.cpp)
target_compile_definitions(pitchwire_cli_tests PRIVATE PITCHWIRE_EXE="$<TARGET_FILE:pitchwire>")
target_link_libraries(pitchwire_cli_tests PRIVATE
  pitchwire_test_audio nlohmann_json::nlohmann_json pitchwire_options GTest::gtest_main)
add_dependencies(pitchwire_cli_tests pitchwire)
gtest_discover_tests(pitchwire_cli_tests DISCOVERY_TIMEOUT 60 PROPERTIES TIMEOUT 120)
