# apsides analyze: exit codes and messages users see.
add_test(NAME cli_analyze_missing_project COMMAND $<TARGET_FILE:apsides> analyze no_such_project.toml --out ${CMAKE_CURRENT_BINARY_DIR}/tmp/analyze_missing)
set_tests_properties(cli_analyze_missing_project PROPERTIES WILL_FAIL TRUE)
add_test(NAME cli_analyze_missing_project_message COMMAND $<TARGET_FILE:apsides> analyze no_such_project.toml --out ${CMAKE_CURRENT_BINARY_DIR}/tmp/analyze_missing)
set_tests_properties(cli_analyze_missing_project_message PROPERTIES PASS_REGULAR_EXPRESSION "no_such_project.toml: no such file")
add_test(NAME cli_analyze_bad_format COMMAND $<TARGET_FILE:apsides> analyze ${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml --out ${CMAKE_CURRENT_BINARY_DIR}/tmp/analyze_fmt --format gif)
set_tests_properties(cli_analyze_bad_format PROPERTIES WILL_FAIL TRUE)
