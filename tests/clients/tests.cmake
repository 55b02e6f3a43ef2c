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
# (cli_live_test.py). This file is read before tests/daemon/tests.cmake: find the python3 here.
pitchwire_find_python(PITCHWIRE_PYTHON_WS "websockets, jsonschema" "python3-websockets python3-jsonschema"
                      "the live tests of the daemon and of the clients")
add_test(NAME cli.live
         COMMAND ${PITCHWIRE_PYTHON_WS} ${CMAKE_CURRENT_LIST_DIR}/cli_live_test.py --daemon $<TARGET_FILE:pitchwired>
                 --pitchwire $<TARGET_FILE:pitchwire>)
set_tests_properties(cli.live PROPERTIES LABELS cli TIMEOUT 180 ENVIRONMENT LD_BIND_NOW=1)

# The live page (clients/web): web.units checks its units and frame store in node (tests/clients/web/units_test.js);
# web.live_view opens it in headless Debian Chromium against a running pitchwired on the demo voice, as observer and
# as supervisor, through the playwright-core that report.browser_setup installs (tests/clients/web/live_view_test.js).
# The screenshots stay in <build>/tests/clients/web/out.
add_test(NAME web.units COMMAND ${PITCHWIRE_NODE} ${CMAKE_CURRENT_LIST_DIR}/web/units_test.js
                                --web ${PROJECT_SOURCE_DIR}/clients/web)
set_tests_properties(web.units PROPERTIES LABELS web TIMEOUT 30)
add_test(NAME web.live_view
         COMMAND ${PITCHWIRE_NODE} ${CMAKE_CURRENT_LIST_DIR}/web/live_view_test.js
                 --daemon $<TARGET_FILE:pitchwired> --web-root ${PROJECT_SOURCE_DIR}/clients/web
                 --modules ${PITCHWIRE_REPORT_NODE_DIR} --chromium ${PITCHWIRE_CHROMIUM}
                 --out ${CMAKE_BINARY_DIR}/tests/clients/web/out)
set_tests_properties(web.live_view PROPERTIES FIXTURES_REQUIRED pitchwire_report_node LABELS web TIMEOUT 120)

# The Python client (clients/python, package pitchwire_client) with pytest against a running pitchwired on its
# demo voice (tests/clients/python): frames and settled frames, markers on both clocks, roles and refusals,
# the blocking client's bounded queue, the clock offset, the band trigger, reconnection, an absent daemon and
# the example routine. The same python3 as the live tests above, which must also import pytest.
execute_process(COMMAND ${PITCHWIRE_PYTHON_WS} -c "import pytest" RESULT_VARIABLE _pw_pytest_rc OUTPUT_QUIET ERROR_QUIET)
if(NOT _pw_pytest_rc EQUAL 0)
  message(FATAL_ERROR "The Python client's tests need pytest in ${PITCHWIRE_PYTHON_WS}: install the Debian package "
                      "python3-pytest (apt-get install python3-pytest), as ./dev test does, or configure with "
                      "-DPITCHWIRE_BUILD_TESTS=OFF.")
endif()
add_test(NAME clients.python
         COMMAND ${PITCHWIRE_PYTHON_WS} -m pytest -p no:cacheprovider -q -ra ${CMAKE_CURRENT_LIST_DIR}/python
                 --pitchwired $<TARGET_FILE:pitchwired>)
set_tests_properties(clients.python PROPERTIES LABELS python TIMEOUT 120 ENVIRONMENT PYTHONDONTWRITEBYTECODE=1)
