# Behaviour every command shares: --help exits 0, an unknown command or option exits 2,
# a missing input file exits 2 with one line naming it. The command list is read from
# src/cli/main.cpp (one register_<command> line per command), so new commands are
# covered as they land.
file(STRINGS ${PROJECT_SOURCE_DIR}/src/cli/main.cpp _apsides_register_lines REGEX "register_[a-z]+\\(app\\)")
set(_apsides_commands "")
foreach(_line IN LISTS _apsides_register_lines)
  string(REGEX MATCH "register_([a-z]+)\\(app\\)" _m "${_line}")
  list(APPEND _apsides_commands ${CMAKE_MATCH_1})
endforeach()

add_test(NAME cli_help COMMAND $<TARGET_FILE:apsides> --help)
set_tests_properties(cli_help PROPERTIES PASS_REGULAR_EXPRESSION "simulate")
add_test(NAME cli_version COMMAND $<TARGET_FILE:apsides> --version)
set_tests_properties(cli_version PROPERTIES PASS_REGULAR_EXPRESSION "apsides [0-9]+\\.[0-9]+")

foreach(_cmd IN LISTS _apsides_commands)
  add_test(NAME cli_${_cmd}_help COMMAND $<TARGET_FILE:apsides> ${_cmd} --help)
  set_tests_properties(cli_${_cmd}_help PROPERTIES PASS_REGULAR_EXPRESSION "${_cmd}")
  # An option no command has: exit 2 with one line on stderr.
  add_test(NAME cli_${_cmd}_unknown_option_exit COMMAND ${CMAKE_COMMAND}
           -DCMD=$<TARGET_FILE:apsides> -DARGS=${_cmd}|--no-such-option -DEXPECT=2 -DONE_LINE=1
           -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
endforeach()

add_test(NAME cli_unknown_command COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=no-such-command -DEXPECT=2
         -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
add_test(NAME cli_no_command COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS= -DEXPECT=2
         -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
add_test(NAME cli_simulate_missing_file COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=simulate|/nonexistent/scenario.toml -DEXPECT=2
         "-DMATCH=^apsides: /nonexistent/scenario.toml: no such file" -DONE_LINE=1
         -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
