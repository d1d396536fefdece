# apsides sample / summarize: exit codes and messages users see.
add_test(NAME cli_sample_missing_project COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=sample|/nonexistent/project.toml|--out|run.h5 -DEXPECT=2
         "-DMATCH=^apsides: /nonexistent/project.toml" -DONE_LINE=1
         -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
add_test(NAME cli_sample_needs_out COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=sample|project.toml -DEXPECT=2 "-DMATCH=--out"
         -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
add_test(NAME cli_sample_odd_walkers_range COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=sample|project.toml|--out|r.h5|--walkers|2 -DEXPECT=2 "-DMATCH=walkers"
         -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
add_test(NAME cli_summarize_missing_file COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=summarize|/nonexistent/run.h5 -DEXPECT=2
         "-DMATCH=^apsides: /nonexistent/run.h5: no such file" -DONE_LINE=1
         -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
add_test(NAME cli_summarize_not_hdf5 COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=summarize|${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml -DEXPECT=2
         "-DMATCH=not an HDF5 file" -DONE_LINE=1
         -P ${CMAKE_CURRENT_LIST_DIR}/expect_exit.cmake)
