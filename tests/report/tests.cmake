# tests/report/tests.cmake - `sluice report` in a real headless Chromium, checked
# against the model and solution files read with h5py (label: report).
# Needs what tools/setup installs: nodejs, chromium, fonts-dejavu-core and the
# npm packages of report/ (npm ci); /usr/bin/python3 with numpy and h5py.
add_test(NAME report_page
  COMMAND /usr/bin/python3 ${PROJECT_SOURCE_DIR}/tests/report/test_report.py
          $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/report_page ${PROJECT_SOURCE_DIR}/report)
set_tests_properties(report_page PROPERTIES LABELS report TIMEOUT 900 ENVIRONMENT "${SLUICE_TEST_ENV};SLUICE_MPIEXEC=${SLUICE_MPIEXEC}")
