# apsides stability and the N-body model at the command line: exit codes and one-line errors.
set(_rp ${PROJECT_SOURCE_DIR}/datasets_synthetic/resonant_pair)
# A Keplerian project is refused (stability needs posterior draws: give RUN.h5).
add_test(NAME cli_stability_keplerian_project COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=stability|${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/project.toml
         "-DEXPECT=2" "-DMATCH=give the run's results file" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
add_test(NAME cli_stability_missing_run COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=stability|no_such_run.h5
         -DEXPECT=2 -DMATCH=no_such_run.h5 -DONE_LINE=1 -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
# `sample` on an N-body project says it has only the Keplerian model yet.
add_test(NAME cli_sample_nbody_refused COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=sample|${_rp}/project.toml|--out|${CMAKE_CURRENT_BINARY_DIR}/cli_nbody.h5
         "-DEXPECT=2" "-DMATCH=has only the Keplerian model yet" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
# An osculating epoch far from the data.
file(WRITE ${CMAKE_CURRENT_BINARY_DIR}/cli_nbody_far_epoch.toml
     "[star]\nmass_msun = 0.95\n[[velocities]]\nfile = \"${_rp}/velocities_Osprey.csv\"\ninstrument = \"Osprey\"\n[[transits]]\nfile = \"${_rp}/transits.csv\"\nplanet = \"b\"\n[model]\ndynamics = \"nbody\"\nosculating_epoch = 2400000.5\n")
add_test(NAME cli_fit_nbody_far_osculating_epoch COMMAND ${CMAKE_COMMAND}
         -DCMD=$<TARGET_FILE:apsides> -DARGS=fit|${CMAKE_CURRENT_BINARY_DIR}/cli_nbody_far_epoch.toml
         "-DEXPECT=2" "-DMATCH=model.osculating_epoch = 2400000.5: must lie within the data" -DONE_LINE=1
         -P ${PROJECT_SOURCE_DIR}/tests/cli/expect_exit.cmake)
