# apsides simulate: writes the data set, exits 2 with one line on a bad scenario.
add_test(NAME cli_simulate_demo COMMAND $<TARGET_FILE:apsides> simulate
         ${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/scenario.toml
         --out ${CMAKE_CURRENT_BINARY_DIR}/tmp/cli_simulate_demo --quiet)
set_tests_properties(cli_simulate_demo PROPERTIES
  PASS_REGULAR_EXPRESSION "Simulated 'Vireo-412' \\(seed 412\\): 150 velocities from 3 instrument\\(s\\), 24 transit times, 2 planet\\(s\\)")
file(WRITE ${CMAKE_CURRENT_BINARY_DIR}/cli_simulate_bad.toml "[[instruments]]\nname = \"A\"\nsigma_ms = -1\n")
add_test(NAME cli_simulate_bad_scenario COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=simulate|${CMAKE_CURRENT_BINARY_DIR}/cli_simulate_bad.toml|--out|${CMAKE_CURRENT_BINARY_DIR}/tmp/cli_simulate_bad
         -DEXPECT=2 "-DMATCH=sigma_ms = -1; it must be > 0" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
file(WRITE ${CMAKE_CURRENT_BINARY_DIR}/cli_simulate_typo.toml "[[instruments]]\nname = \"A\"\nn_point = 5\n")
add_test(NAME cli_simulate_mistyped_key COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=simulate|${CMAKE_CURRENT_BINARY_DIR}/cli_simulate_typo.toml
         -DEXPECT=2 "-DMATCH=cli_simulate_typo.toml:3: unknown key 'instruments.n_point'; did you mean 'n_points'\\?" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
