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

pitchwire_find_python(PITCHWIRE_SCHEMA_PYTHON "jsonschema, yaml" "python3-jsonschema python3-yaml"
                      "The protocol schema test")

add_test(NAME protocol.schemas
  COMMAND "${PITCHWIRE_SCHEMA_PYTHON}" "${CMAKE_CURRENT_LIST_DIR}/check_schemas.py"
          --samples $<TARGET_FILE:pitchwire_protocol_samples> --root "${PROJECT_SOURCE_DIR}")
set_tests_properties(protocol.schemas PROPERTIES LABELS protocol TIMEOUT 120)
