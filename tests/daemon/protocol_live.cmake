# daemon.protocol_live: protocol v1 against a running pitchwired on its demo voice (protocol_live_test.py):
# handshake, roles and refusals (token, subprotocol, Origin, Host), subscriptions and settled corrections,
# requests and their errors, bad input and close codes, slow clients and dropped_frames, static files, and
# SIGTERM. Every message received is validated against protocol/schema/server_message.json.
# Included by tests/daemon/tests.cmake.
pitchwire_find_python(PITCHWIRE_PYTHON_WS "websockets, jsonschema" "python3-websockets python3-jsonschema"
                      "the live protocol test")
add_test(NAME daemon.protocol_live
         COMMAND "${PITCHWIRE_PYTHON_WS}" "${CMAKE_CURRENT_LIST_DIR}/protocol_live_test.py"
                 --daemon $<TARGET_FILE:pitchwired>
                 --schemas "${PROJECT_SOURCE_DIR}/protocol/schema"
                 --source "${PROJECT_SOURCE_DIR}")
# RUN_SERIAL: the test times clients that stop reading against the kernel buffers and slow_client_s, and
# runs a few hundred messages per second through Python; other tests at once can starve it of CPU.
set_tests_properties(daemon.protocol_live PROPERTIES LABELS daemon TIMEOUT 120 RUN_SERIAL TRUE)
