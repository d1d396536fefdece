# apsides compare: the demo system's planet count, the JSON contract, bad input.
add_test(NAME cli_compare_demo_selects_two COMMAND $<TARGET_FILE:apsides> compare
         ${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml --max-planets 2 --quiet
         --json ${CMAKE_CURRENT_BINARY_DIR}/cli_compare_demo.json)
set_tests_properties(cli_compare_demo_selects_two PROPERTIES
  PASS_REGULAR_EXPRESSION "Selected: 2 planet\\(s\\)" TIMEOUT 300)
add_test(NAME cli_compare_missing_file COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=compare|no_such_project.toml|--max-planets|1
         -DEXPECT=2 -DMATCH=no_such_project.toml -DONE_LINE=1 -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_compare_max_planets_out_of_range COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=compare|${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml|--max-planets|12
         -DEXPECT=2 -DMATCH=max-planets -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_compare_too_few_live_points COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=compare|${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml|--live-points|3
         -DEXPECT=2 -DMATCH=live-points -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
file(WRITE ${CMAKE_CURRENT_BINARY_DIR}/cli_compare_bad_prior.toml
     "[[velocities]]\nfile = \"${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/velocities_Kestrel.csv\"\n[priors]\n\"d.period_d\" = { dist = \"log-uniform\", min = 1, max = 10 }\n")
add_test(NAME cli_compare_prior_for_missing_planet COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=compare|${CMAKE_CURRENT_BINARY_DIR}/cli_compare_bad_prior.toml|--max-planets|1
         -DEXPECT=2 -DMATCH=d.period_d -DONE_LINE=1 -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
# A unit that looks wrong (m/s values declared km/s) is warned about before the long run.
file(WRITE ${CMAKE_CURRENT_BINARY_DIR}/cli_compare_unit.toml
     "[[velocities]]\nfile = \"${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/velocities_Kestrel.csv\"\nvelocity_unit = \"km/s\"\n")
add_test(NAME cli_compare_warns_of_unit COMMAND $<TARGET_FILE:apsides> compare
         ${CMAKE_CURRENT_BINARY_DIR}/cli_compare_unit.toml --max-planets 0 --live-points 20 --quiet)
set_tests_properties(cli_compare_warns_of_unit PROPERTIES PASS_REGULAR_EXPRESSION "these look like m/s" TIMEOUT 120)
