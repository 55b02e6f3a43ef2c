# Reference tests (ctest label `reference`): pitchwire against SPTK RAPT on espeak-ng speech, and the
# accuracy bars of bench/accuracy.py on a quick generated corpus. They run the built `pitchwire` program and
# the `pitchwire-corpus` generator, and need Debian's sptk, aubio-tools, espeak-ng, sox and python3-numpy.
#
# bench/ (which defines pitchwire-corpus) is added after tests/, so the tests are registered by a call
# deferred to the end of the project's top-level directory; they therefore live in the top-level test list
# (run ctest from the build folder's root, e.g. `ctest -L reference`).

function(pitchwire_reference_tests)
  if(NOT (TARGET pitchwire AND TARGET pitchwire-corpus))
    message(STATUS "pitchwire reference tests not registered: targets pitchwire and pitchwire-corpus are needed")
    return()
  endif()

  foreach(tool IN ITEMS "sptk:sptk" "aubiopitch:aubio-tools" "espeak-ng:espeak-ng" "sox:sox")
    string(REPLACE ":" ";" tool "${tool}")
    list(GET tool 0 program)
    list(GET tool 1 package)
    string(MAKE_C_IDENTIFIER "PITCHWIRE_${program}_PROGRAM" var)
    string(TOUPPER "${var}" var)
    find_program(${var} ${program})
    if(NOT ${var})
      message(FATAL_ERROR "The reference tests need `${program}`: install the Debian package ${package} "
                          "(apt-get install ${package}), or configure with -DPITCHWIRE_BUILD_TESTS=OFF.")
    endif()
  endforeach()

  pitchwire_find_python(PITCHWIRE_REFERENCE_PYTHON "numpy" "python3-numpy" "The reference tests")

  set(src "${PROJECT_SOURCE_DIR}")
  set(work "${PROJECT_BINARY_DIR}/tests/reference")
  file(MAKE_DIRECTORY "${work}")

  add_test(NAME reference.espeak_vs_rapt_quick
    COMMAND "${PITCHWIRE_REFERENCE_PYTHON}" "${src}/tests/reference/espeak_vs_rapt.py"
            --pitchwire $<TARGET_FILE:pitchwire> --quick --jobs 2)
  add_test(NAME reference.accuracy_quick
    COMMAND "${PITCHWIRE_REFERENCE_PYTHON}" "${src}/bench/accuracy.py"
            --pitchwire $<TARGET_FILE:pitchwire>
            --make-corpus $<TARGET_FILE:pitchwire-corpus> --quick
            --corpus "${work}/corpus-quick" --jobs 2 --check-floors --out "${work}/accuracy-quick.md")
  set_tests_properties(reference.espeak_vs_rapt_quick PROPERTIES LABELS reference TIMEOUT 600)
  set_tests_properties(reference.accuracy_quick PROPERTIES LABELS reference TIMEOUT 1200)
  # Both run two tracker processes at once: never alongside each other on a 2-core machine.
  set_tests_properties(reference.espeak_vs_rapt_quick reference.accuracy_quick PROPERTIES RUN_SERIAL TRUE)
endfunction()

cmake_language(DEFER DIRECTORY "${PROJECT_SOURCE_DIR}" CALL pitchwire_reference_tests)
