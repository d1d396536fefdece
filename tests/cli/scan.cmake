# apsides scan: the demo's planets among the top peaks, 51 Peg's period, aliases, bad options.
add_test(NAME cli_scan_demo_project COMMAND $<TARGET_FILE:apsides> scan
         ${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml --quiet
         --json ${CMAKE_CURRENT_BINARY_DIR}/cli_scan_demo.json --csv ${CMAKE_CURRENT_BINARY_DIR}/cli_scan_demo.csv)
set_tests_properties(cli_scan_demo_project PROPERTIES
  PASS_REGULAR_EXPRESSION "\n +1 +(6\\.41|118\\.[0-9]|11[0-9]\\.[0-9]|12[0-9]\\.[0-9])[0-9]* +[0-9.]+ +[0-9.]+ +[0-9.e-]+")
add_test(NAME cli_scan_51peg COMMAND $<TARGET_FILE:apsides> scan
         ${PROJECT_SOURCE_DIR}/tests/data/real/51peg_rv_birkby2017.txt --peaks 5)
set_tests_properties(cli_scan_51peg PROPERTIES PASS_REGULAR_EXPRESSION "\n +1 +4\\.230[0-9]+ ")
add_test(NAME cli_scan_bootstrap COMMAND $<TARGET_FILE:apsides> scan
         ${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/velocities_Kestrel.csv --bootstrap 20 --seed 3 --peaks 3
         --method fast)
set_tests_properties(cli_scan_bootstrap PROPERTIES PASS_REGULAR_EXPRESSION "FAP boot")
add_test(NAME cli_scan_bad_oversample COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=scan|${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/velocities_Kestrel.csv|--oversample|0
         -DEXPECT=2 -DMATCH=oversample -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_scan_bad_normalization COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=scan|${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/velocities_Kestrel.csv|--normalization|loud
         -DEXPECT=2 -DMATCH=normalization -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_scan_period_range_empty COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=scan|${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/velocities_Kestrel.csv|--min-period|10|--max-period|5
         -DEXPECT=2 -DMATCH=max_period_days -DONE_LINE=1 -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
