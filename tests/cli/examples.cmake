# The worked examples in notebooks_free_examples/: each run.sh simulates its invented system,
# runs the commands of the walkthrough and checks the key result against truth.json
# (exit 0 = the example still says what its README says). The output of every command
# (stdout and stderr together, as the reader sees it) must not repeat a line: each note
# and warning is printed once.
foreach(example 01_first_look 02_second_planet_or_not 03_next_transits 04_three_instruments)
  add_test(NAME example_${example}
           COMMAND ${CMAKE_COMMAND} -DCMD=bash
                   "-DARGS=${PROJECT_SOURCE_DIR}/notebooks_free_examples/${example}/run.sh|$<TARGET_FILE:apsides>|${CMAKE_CURRENT_BINARY_DIR}/tmp/example_${example}"
                   -P ${CMAKE_CURRENT_LIST_DIR}/expect_unique_lines.cmake)
  set_tests_properties(example_${example} PROPERTIES TIMEOUT 300)
endforeach()
