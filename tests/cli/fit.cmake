# apsides fit: the demo search, km/s input, project files, bad priors and bad options.
add_test(NAME cli_fit_demo_search COMMAND $<TARGET_FILE:apsides> fit
         ${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml --search --quiet
         --json ${CMAKE_CURRENT_BINARY_DIR}/cli_fit_demo.json)
set_tests_properties(cli_fit_demo_search PROPERTIES
  PASS_REGULAR_EXPRESSION "b +6\\.41[0-9]+ [^\n]*\nc +118\\.[0-9]+")
add_test(NAME cli_fit_one_planet_km_s COMMAND $<TARGET_FILE:apsides> fit
         ${PROJECT_SOURCE_DIR}/tests/data/real/hd20868_rv_moutou2009.txt --velocity-unit km/s
         --planets 1 --star-mass 0.78)
set_tests_properties(cli_fit_one_planet_km_s PROPERTIES PASS_REGULAR_EXPRESSION "b +380\\.[89]")
file(WRITE ${CMAKE_CURRENT_BINARY_DIR}/cli_fit_bad_prior.toml
     "[[velocities]]\nfile = \"${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/velocities_Kestrel.csv\"\n[priors]\n\"e.period_d\" = { dist = \"log-uniform\", min = 1, max = 10 }\n[search]\nmax_planets = 2\n")
add_test(NAME cli_fit_prior_for_missing_planet COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=fit|${CMAKE_CURRENT_BINARY_DIR}/cli_fit_bad_prior.toml|--planets|1
         -DEXPECT=2 "-DMATCH=priors.e.period_d: this model has no parameter" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_fit_planets_and_search_exclusive COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=fit|${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml|--planets|1|--search
         -DEXPECT=2 -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_fit_missing_file COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=fit|no_such_file.csv|--planets|1
         -DEXPECT=2 -DMATCH=no_such_file.csv -DONE_LINE=1 -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
