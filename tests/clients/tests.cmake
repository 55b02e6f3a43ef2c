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

# `pitchwire report`: the reader and the page in-process, and the executable's errors and file.
add_executable(pitchwire_report_tests ${CMAKE_CURRENT_LIST_DIR}/report_test.cpp)
target_compile_definitions(pitchwire_report_tests PRIVATE PITCHWIRE_EXE="$<TARGET_FILE:pitchwire>")
target_link_libraries(pitchwire_report_tests PRIVATE
  pitchwire::report pitchwire_test_audio nlohmann_json::nlohmann_json pitchwire_options GTest::gtest_main)
add_dependencies(pitchwire_report_tests pitchwire)
gtest_discover_tests(pitchwire_report_tests TEST_PREFIX "report." DISCOVERY_TIMEOUT 60 PROPERTIES LABELS report TIMEOUT 60)

# The report's page in headless Debian Chromium, driven by playwright-core (pinned in report/package.json and
# package-lock.json; it downloads no browser): report.browser_setup installs it with `npm ci` into the build
# folder, report.browser writes a session known by construction, runs `pitchwire report` and checks the
# screenshot's pixels (tests/clients/report/report_browser_test.js). The screenshots stay in
# <build>/tests/clients/report/out.
find_program(PITCHWIRE_NODE node)
find_program(PITCHWIRE_NPM npm)
find_program(PITCHWIRE_CHROMIUM chromium PATHS /usr/bin)
if(NOT PITCHWIRE_NODE OR NOT PITCHWIRE_NPM OR NOT PITCHWIRE_CHROMIUM)
  message(FATAL_ERROR "The report's browser test needs node, npm and Debian's chromium: install the Debian packages "
                      "chromium (and nodejs npm where node is missing), as ./dev test does, set PITCHWIRE_NODE, "
                      "PITCHWIRE_NPM and PITCHWIRE_CHROMIUM, or configure with -DPITCHWIRE_BUILD_TESTS=OFF.")
endif()
set(PITCHWIRE_REPORT_NODE_DIR ${CMAKE_BINARY_DIR}/tests/clients/report)
foreach(file IN ITEMS package.json package-lock.json .npmrc)
  configure_file(${CMAKE_CURRENT_LIST_DIR}/report/${file} ${PITCHWIRE_REPORT_NODE_DIR}/${file} COPYONLY)
endforeach()
add_test(NAME report.browser_setup
         COMMAND ${PITCHWIRE_NPM} ci --no-audit --no-fund --loglevel=error
         WORKING_DIRECTORY ${PITCHWIRE_REPORT_NODE_DIR})
set_tests_properties(report.browser_setup PROPERTIES FIXTURES_SETUP pitchwire_report_node LABELS report TIMEOUT 300)
add_test(NAME report.browser
         COMMAND ${PITCHWIRE_NODE} ${CMAKE_CURRENT_LIST_DIR}/report/report_browser_test.js
                 --pitchwire $<TARGET_FILE:pitchwire> --modules ${PITCHWIRE_REPORT_NODE_DIR}
                 --chromium ${PITCHWIRE_CHROMIUM} --out ${PITCHWIRE_REPORT_NODE_DIR}/out)
set_tests_properties(report.browser PROPERTIES FIXTURES_REQUIRED pitchwire_report_node LABELS report TIMEOUT 120)

# The terminal commands against a running daemon on the demo voice, `watch` under a pseudo-terminal
# (cli_live_test.py).
add_test(NAME cli.live
         COMMAND ${PITCHWIRE_PYTHON_WS} ${CMAKE_CURRENT_LIST_DIR}/cli_live_test.py --daemon $<TARGET_FILE:pitchwired>
                 --pitchwire $<TARGET_FILE:pitchwire>)
set_tests_properties(cli.live PROPERTIES LABELS cli TIMEOUT 180 ENVIRONMENT LD_BIND_NOW=1)
