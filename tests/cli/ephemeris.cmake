# apsides ephemeris: what users see (exit codes and messages).
set(_eph_demo ${PROJECT_SOURCE_DIR}/datasets_synthetic/demo/transits.csv)
set(_eph_wasp ${PROJECT_SOURCE_DIR}/tests/data/real/wasp12b_transits_wong2022.txt)
set(_eph_tmp ${CMAKE_CURRENT_BINARY_DIR}/tmp/cli_ephemeris)
file(MAKE_DIRECTORY ${_eph_tmp})

add_test(NAME cli_ephemeris_demo_predicts_ten_transits
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_demo} --quiet)
set_tests_properties(cli_ephemeris_demo_predicts_ten_transits PROPERTIES
  PASS_REGULAR_EXPRESSION "Predicted transits \\(linear[^\n]*\n[^\n]*UTC\n +215 +2460780\\.[0-9]+ .*\n +224 +24[0-9]+\\.[0-9]+ [^\n]*\n  UTC = BJD_TDB")

add_test(NAME cli_ephemeris_full_precision_bjd
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_demo} --next 2 --quiet)
set_tests_properties(cli_ephemeris_full_precision_bjd PROPERTIES
  PASS_REGULAR_EXPRESSION "T0    \\(epoch +0\\)  24594[0-9][0-9]\\.[0-9][0-9][0-9][0-9][0-9][0-9][0-9] \\+/-")

add_test(NAME cli_ephemeris_date_range
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_demo} --from 2460500 --to 2460520 --days)
set_tests_properties(cli_ephemeris_date_range PROPERTIES
  PASS_REGULAR_EXPRESSION "246050[0-9]\\.[0-9]+ +0\\.[0-9]+ +20[0-9][0-9]-[0-9][0-9]-[0-9][0-9] [0-9:]+\n.*246051")

add_test(NAME cli_ephemeris_wasp12_notes_ignored_column_and_decay
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_wasp} --no-ttv --next 1)
set_tests_properties(cli_ephemeris_wasp12_notes_ignored_column_and_decay PROPERTIES
  PASS_REGULAR_EXPRESSION "extra column\\(s\\) not used: O-C.*dP/dn  -1\\.0[0-9]+e-09.*period change favoured")

add_test(NAME cli_ephemeris_json_written
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_demo} --quiet --json ${_eph_tmp}/demo.json)

add_test(NAME cli_ephemeris_missing_file_exits_2
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_tmp}/no_such_file.csv)
set_tests_properties(cli_ephemeris_missing_file_exits_2 PROPERTIES WILL_FAIL TRUE)
add_test(NAME cli_ephemeris_missing_file_message
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_tmp}/no_such_file.csv)
set_tests_properties(cli_ephemeris_missing_file_message PROPERTIES
  PASS_REGULAR_EXPRESSION "no_such_file.csv")

add_test(NAME cli_ephemeris_to_needs_from
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_demo} --to 2460600)
set_tests_properties(cli_ephemeris_to_needs_from PROPERTIES WILL_FAIL TRUE)

add_test(NAME cli_ephemeris_unknown_planet
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_demo} --planet z)
set_tests_properties(cli_ephemeris_unknown_planet PROPERTIES
  PASS_REGULAR_EXPRESSION "--planet z: .* has no transits of that planet")

add_test(NAME cli_ephemeris_bad_outlier_sigma
         COMMAND $<TARGET_FILE:apsides> ephemeris ${_eph_demo} --outlier-sigma -3)
set_tests_properties(cli_ephemeris_bad_outlier_sigma PROPERTIES WILL_FAIL TRUE)

# Predictions from the model the data support, and claims gated by the evidence.
set(_eph_t1 ${PROJECT_SOURCE_DIR}/tests/data/real/trappist1_transits_agol2021.csv)
# TRAPPIST-1 f (Agol et al. 2021): a ~30 min timing variation; the sinusoid predicts, its
# scatter is in the sigma, and the quadratic's curvature is not reported as a period change.
add_test(NAME cli_ephemeris_trappist1f_predicts_with_the_variation
         COMMAND ${CMAKE_COMMAND} -DCMD=$<TARGET_FILE:apsides>
                 "-DARGS=ephemeris|${_eph_t1}|--planet|f|--next|3"
                 "-DMATCH=-> sinusoid: BIC .*Predicted transits \\(sinusoid ephemeris.*A significant timing variation is present"
                 "-DNOT_MATCH=period change favoured"
                 -P ${CMAKE_CURRENT_LIST_DIR}/expect_unique_lines.cmake)
# WASP-12b (Wong et al. 2022) with the timing-variation search on: the decay is still
# favoured, because the quadratic beats the sinusoid too.
add_test(NAME cli_ephemeris_wasp12_decay_beats_the_sinusoid
         COMMAND ${CMAKE_COMMAND} -DCMD=$<TARGET_FILE:apsides>
                 "-DARGS=ephemeris|${_eph_wasp}|--next|2"
                 "-DMATCH=dP/dn  -1\\.0[0-9]+e-09.*\\(period change favoured\\).*Predicted transits \\(quadratic ephemeris"
                 -P ${CMAKE_CURRENT_LIST_DIR}/expect_unique_lines.cmake)
add_test(NAME cli_ephemeris_demo_notes_once
         COMMAND ${CMAKE_COMMAND} -DCMD=$<TARGET_FILE:apsides> "-DARGS=ephemeris|${_eph_demo}|--next|3"
                 "-DMATCH=Predicted transits \\(linear ephemeris"
                 -P ${CMAKE_CURRENT_LIST_DIR}/expect_unique_lines.cmake)
