# Tests of pitchwire::protocol (protocol/): GoogleTest unit tests of decoding and encoding, and
# protocol.schemas, which validates a sample of every message against protocol/schema/ with python3-jsonschema
# and checks protocol/asyncapi.yaml and docs/protocol.md against the names in the code.
# All carry the label `protocol` (`ctest -L protocol`). Included by tests/CMakeLists.txt.

add_executable(pitchwire_protocol_tests
  ${CMAKE_CURRENT_LIST_DIR}/test_decode.cpp
  ${CMAKE_CURRENT_LIST_DIR}/test_encode.cpp
)
target_link_libraries(pitchwire_protocol_tests PRIVATE pitchwire::protocol pitchwire_options GTest::gtest_main)
gtest_discover_tests(pitchwire_protocol_tests DISCOVERY_TIMEOUT 60 PROPERTIES LABELS protocol)

add_executable(pitchwire_protocol_samples ${CMAKE_CURRENT_LIST_DIR}/protocol_samples.cpp)
target_link_libraries(pitchwire_protocol_samples PRIVATE pitchwire::protocol pitchwire_options)

# Debian's python3 carries Debian's python packages; another python3 first on PATH may not.
if(NOT PITCHWIRE_SCHEMA_PYTHON)
  find_program(_pw_schema_debian_python python3 PATHS /usr/bin NO_DEFAULT_PATH)
  find_program(_pw_schema_path_python python3)
  foreach(candidate IN ITEMS "${_pw_schema_debian_python}" "${_pw_schema_path_python}")
    if(candidate)
      execute_process(COMMAND "${candidate}" -c "import jsonschema, yaml" RESULT_VARIABLE rc OUTPUT_QUIET ERROR_QUIET)
      if(rc EQUAL 0)
        set(PITCHWIRE_SCHEMA_PYTHON "${candidate}" CACHE FILEPATH "python3 with jsonschema and yaml for protocol.schemas")
        break()
      endif()
    endif()
  endforeach()
  if(NOT PITCHWIRE_SCHEMA_PYTHON)
    message(FATAL_ERROR "The protocol schema test needs python3 with jsonschema and yaml: install the Debian packages "
                        "python3-jsonschema and python3-yaml (apt-get install python3-jsonschema python3-yaml), "
                        "set PITCHWIRE_SCHEMA_PYTHON, or configure with -DPITCHWIRE_BUILD_TESTS=OFF.")
  endif()
endif()

add_test(NAME protocol.schemas
  COMMAND "${PITCHWIRE_SCHEMA_PYTHON}" "${CMAKE_CURRENT_LIST_DIR}/check_schemas.py"
          --samples $<TARGET_FILE:pitchwire_protocol_samples> --root "${PROJECT_SOURCE_DIR}")
set_tests_properties(protocol.schemas PROPERTIES LABELS protocol TIMEOUT 120)
