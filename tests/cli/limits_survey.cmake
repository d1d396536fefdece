# apsides limits / survey: bad inputs are one line on stderr and exit code 2.
set(_demo ${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml)
set(_tmp ${CMAKE_CURRENT_BINARY_DIR}/tmp/cli_limits)
file(MAKE_DIRECTORY ${_tmp})
file(WRITE ${_tmp}/empty_catalog.toml "stages = \"scan\"\n")
foreach(_case
    "limits_zero_cells|limits|${_demo}|--out|${_tmp}/a|--period-cells|0|period_cells = 0"
    "limits_zero_injections|limits|${_demo}|--out|${_tmp}/b|--injections|0|injections = 0"
    "limits_missing_project|limits|${_tmp}/none.toml|--out|${_tmp}/c|none.toml: no such file"
    "survey_empty_catalog|survey|${_tmp}/empty_catalog.toml|--out|${_tmp}/d|no .*star.* entries"
    "survey_missing_catalog|survey|${_tmp}/nothing.toml|--out|${_tmp}/e|nothing.toml: no such file")
  string(REPLACE "|" ";" _parts "${_case}")
  list(POP_FRONT _parts _name)
  list(POP_BACK _parts _match)
  string(REPLACE ";" "|" _args "${_parts}")
  add_test(NAME cli_${_name} COMMAND ${CMAKE_COMMAND} -DCMD=$<TARGET_FILE:apsides> "-DARGS=${_args}" -DEXPECT=2
           "-DMATCH=${_match}" -DONE_LINE=1 -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
endforeach()
