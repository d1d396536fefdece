# The Python module (python/): its pytest suites in tests/python (Debian's python3-pytest,
# run with /usr/bin/python3 -m pytest), the Python worked example and the helper scripts,
# registered when the module is built (APSIDES_BUILD_PYTHON).
if(TARGET apsides_python)
  set(_apsides_py_env
      "PYTHONPATH=${CMAKE_BINARY_DIR}/python"
      "APSIDES_BINARY=$<TARGET_FILE:apsides>"
      "APSIDES_SOURCE_DIR=${PROJECT_SOURCE_DIR}"
      "PYTHONDONTWRITEBYTECODE=1")
  file(GLOB _apsides_py_tests CONFIGURE_DEPENDS ${PROJECT_SOURCE_DIR}/tests/python/test_*.py)
  foreach(f IN LISTS _apsides_py_tests)
    get_filename_component(stem ${f} NAME_WE)
    string(REGEX REPLACE "^test_" "python_" name ${stem})
    add_test(NAME ${name}
             COMMAND ${Python_EXECUTABLE} -m pytest -q -p no:cacheprovider
                     --basetemp=${CMAKE_CURRENT_BINARY_DIR}/tmp/${name} ${f})
    set_tests_properties(${name} PROPERTIES ENVIRONMENT "${_apsides_py_env}" TIMEOUT 300)
  endforeach()

  add_test(NAME example_06_python
           COMMAND ${Python_EXECUTABLE} ${PROJECT_SOURCE_DIR}/notebooks_free_examples/06_python/example.py
                   ${CMAKE_CURRENT_BINARY_DIR}/tmp/example_06_python)
  set_tests_properties(example_06_python PROPERTIES ENVIRONMENT "${_apsides_py_env}" TIMEOUT 300
                       PASS_REGULAR_EXPRESSION "example 06_python: OK")

  add_test(NAME python_scripts
           COMMAND bash ${PROJECT_SOURCE_DIR}/tests/python/scripts_test.sh ${CMAKE_BINARY_DIR}
                   ${CMAKE_CURRENT_BINARY_DIR}/tmp/python_scripts)
  set_tests_properties(python_scripts PROPERTIES TIMEOUT 120)
endif()
