# Reading real archives from the command line: reduced times need --time-offset (exit 2
# naming the common offsets without it, or when it is given twice), repeated timestamps
# are kept with a warning, empty indicator cells are fine.
set(_real ${PROJECT_SOURCE_DIR}/tests/data/real)
add_test(NAME cli_scan_reduced_times_without_offset COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=scan|${_real}/l9859_harps_cloutier2019.dat
         -DEXPECT=2 "-DMATCH=time 1408\\.853661 looks reduced .*2457000" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_scan_time_offset COMMAND $<TARGET_FILE:apsides> scan ${_real}/l9859_harps_cloutier2019.dat
         --time-offset 2457000 --peaks 3 --quiet)
set_tests_properties(cli_scan_time_offset PROPERTIES PASS_REGULAR_EXPRESSION "165 velocities")
add_test(NAME cli_fit_time_offset_on_full_bjd COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=fit|${_real}/51peg_rv_birkby2017.txt|--planets|1|--time-offset|2450000
         -DEXPECT=2 "-DMATCH=is already a full BJD, but time_offset = 2450000" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
file(WRITE ${CMAKE_CURRENT_BINARY_DIR}/cli_inputs_offset.toml
     "[[velocities]]\nfile = \"${_real}/l9859_harps_cloutier2019.dat\"\ntime_offset = 2457000\n")
add_test(NAME cli_fit_time_offset_given_twice COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=fit|${CMAKE_CURRENT_BINARY_DIR}/cli_inputs_offset.toml|--planets|1|--time-offset|2450000
         -DEXPECT=2 "-DMATCH=the offset is given twice" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_scan_bad_time_offset COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=scan|${_real}/l9859_harps_cloutier2019.dat|--time-offset|-5
         -DEXPECT=2 "-DMATCH=--time-offset is -5; it must be between 0 and 2500000" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_ephemeris_time_offset_on_full_bjd COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=ephemeris|${_real}/trappist1_transits_agol2021.csv|--planet|b|--time-offset|2450000
         -DEXPECT=2 "-DMATCH=mid-transit time 2457322\\.515310 is already a full BJD" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
# HD 217107 as downloaded: an S-index column empty on most rows, two repeated timestamps.
add_test(NAME cli_scan_hd217107_as_it_comes COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=scan|${_real}/hd217107_rv_cls_rosenthal2021.csv|--peaks|3|--quiet
         -DEXPECT=0 "-DMATCH=warning: [^\n]*2 repeated \\(time, instrument\\) pairs, every point kept: lines 87 and 88"
         -DONE_LINE=1 -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_scan_hd217107_peak COMMAND $<TARGET_FILE:apsides> scan
         ${_real}/hd217107_rv_cls_rosenthal2021.csv --peaks 3 --quiet)
set_tests_properties(cli_scan_hd217107_peak PROPERTIES PASS_REGULAR_EXPRESSION "\n +1 +7\\.12[67][0-9]* ")
# A simulated scenario on a time scale of its own (day 0.5 onwards): the project simulate
# writes declares time_offset = 0, so the data read back as they are.
file(WRITE ${CMAKE_CURRENT_BINARY_DIR}/cli_inputs_day_zero.toml
     "seed = 3\n[observing]\nstart_bjd = 0.5\nspan_days = 400\n[[instruments]]\nname = \"Wren\"\nn_points = 40\n[[planets]]\nperiod_d = 12.5\nK_ms = 30\n")
add_test(NAME cli_inputs_simulate_day_zero COMMAND $<TARGET_FILE:apsides> simulate
         ${CMAKE_CURRENT_BINARY_DIR}/cli_inputs_day_zero.toml --out ${CMAKE_CURRENT_BINARY_DIR}/tmp/cli_inputs_day_zero --quiet)
set_tests_properties(cli_inputs_simulate_day_zero PROPERTIES FIXTURES_SETUP inputs_day_zero)
add_test(NAME cli_inputs_scan_day_zero COMMAND $<TARGET_FILE:apsides> scan
         ${CMAKE_CURRENT_BINARY_DIR}/tmp/cli_inputs_day_zero/project.toml --peaks 1 --quiet)
set_tests_properties(cli_inputs_scan_day_zero PROPERTIES FIXTURES_REQUIRED inputs_day_zero
  PASS_REGULAR_EXPRESSION "\n +1 +12\\.[45][0-9]* ")
