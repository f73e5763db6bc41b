# tests/tests.cmake - every test of the project, registered with CTest.
# Included from the top-level CMakeLists.txt (paths relative to PROJECT_SOURCE_DIR).

find_library(CMOCKA_LIBRARY cmocka)
find_path(CMOCKA_INCLUDE_DIR cmocka.h)
if(NOT CMOCKA_LIBRARY OR NOT CMOCKA_INCLUDE_DIR)
  message(FATAL_ERROR "cmocka not found: install the Debian package libcmocka-dev")
endif()

find_program(SLUICE_MPIEXEC NAMES mpiexec mpirun)
set(SLUICE_MPI_FLAGS --oversubscribe)
set(SLUICE_TEST_ENV "OMPI_ALLOW_RUN_AS_ROOT=1;OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1;OMPI_MCA_rmaps_base_oversubscribe=1;SLUICE_CACHE=${PROJECT_BINARY_DIR}/test-cache")

# unit tests: one executable per tests/unit/test_*.c
file(GLOB SLUICE_UNIT_TESTS CONFIGURE_DEPENDS ${PROJECT_SOURCE_DIR}/tests/unit/test_*.c)
foreach(src ${SLUICE_UNIT_TESTS})
  get_filename_component(name ${src} NAME_WE)
  add_executable(${name} ${src})
  target_include_directories(${name} PRIVATE ${PROJECT_SOURCE_DIR}/src ${CMOCKA_INCLUDE_DIR})
  target_compile_definitions(${name} PRIVATE _POSIX_C_SOURCE=200809L
    SLUICE_SOURCE_DIR="${PROJECT_SOURCE_DIR}" SLUICE_BINARY_DIR="${PROJECT_BINARY_DIR}")
  target_compile_options(${name} PRIVATE ${SLUICE_WARNINGS} -Wno-missing-prototypes)
  target_link_libraries(${name} PRIVATE sluice_obj ${CMOCKA_LIBRARY} PkgConfig::HDF5P UMFPACK::UMFPACK m)
  add_test(NAME unit_${name} COMMAND ${name})
  set_tests_properties(unit_${name} PROPERTIES LABELS unit TIMEOUT 300 ENVIRONMENT "${SLUICE_TEST_ENV}")
endforeach()

# shell-driven CLI and MPI tests
file(GLOB SLUICE_CLI_TESTS CONFIGURE_DEPENDS ${PROJECT_SOURCE_DIR}/tests/cli/*.sh)
list(FILTER SLUICE_CLI_TESTS EXCLUDE REGEX "/lib(_ckpt)?\\.sh$")  # shared helpers, not tests
list(FILTER SLUICE_CLI_TESTS EXCLUDE REGEX "/fault_alloc\\.sh$")  # registered per step below
# sluice_cli_test(NAME SCRIPT [ARGS...]): cli_NAME runs SCRIPT with the binary,
# its own work directory, the source tree and ARGS
function(sluice_cli_test name script)
  add_test(NAME cli_${name} COMMAND bash ${script} $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/cli_${name}
           ${PROJECT_SOURCE_DIR} ${ARGN})
  set_tests_properties(cli_${name} PROPERTIES LABELS cli TIMEOUT 600 SKIP_RETURN_CODE 77
                       ENVIRONMENT "${SLUICE_TEST_ENV};SLUICE_MPIEXEC=${SLUICE_MPIEXEC};SLUICE_PYTHON=/usr/bin/python3")
endfunction()
foreach(script ${SLUICE_CLI_TESTS})
  get_filename_component(name ${script} NAME_WE)
  sluice_cli_test(${name} ${script})
endforeach()
# the allocation-failure sweep runs the CLI about 600 times (every allocation of
# import, build, solve, pi, verify, export): one test per command, so each has
# its own timeout (30 minutes: the pi sweep, about 240 runs, is the longest)
# and two run side by side. As one test it timed out after 1800 s with both
# cores busy (stress-ng and other work, load average 14).
foreach(step import build solve pi verify export)
  sluice_cli_test(fault_alloc_${step} ${PROJECT_SOURCE_DIR}/tests/cli/fault_alloc.sh ${step})
  set_tests_properties(cli_fault_alloc_${step} PROPERTIES TIMEOUT 1800)
endforeach()
# the kill trials, the signal cases and the extra bad-input cases do a fixed
# amount of work that takes 3-7 minutes on two idle cores; with both cores kept
# busy by other work (stress-ng, load average 10) cli_checkpoint_kill needed
# more than 600 s. A timeout here only catches a hang, so give them 30 minutes.
set_tests_properties(cli_checkpoint_kill cli_checkpoint_signals cli_bad_input_more cli_bad_input_datasets cli_direct_stop
                     PROPERTIES TIMEOUT 1800)
# instrumented (ASan + UBSan) the CLI scripts run several times slower
if(SLUICE_SANITIZE)
  foreach(script ${SLUICE_CLI_TESTS})
    get_filename_component(name ${script} NAME_WE)
    set_tests_properties(cli_${name} PROPERTIES TIMEOUT 1800)
  endforeach()
endif()
file(GLOB SLUICE_MPI_TESTS CONFIGURE_DEPENDS ${PROJECT_SOURCE_DIR}/tests/mpi/*.sh)
foreach(script ${SLUICE_MPI_TESTS})
  get_filename_component(name ${script} NAME_WE)
  add_test(NAME mpi_${name} COMMAND bash ${script} $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/mpi_${name}
           ${PROJECT_SOURCE_DIR})
  # 30 minutes: a timeout only catches a hang; under stress-ng plus the rest
  # of the suite (load average 8-9) mpi_ranks took 524 s and mpi_build_stream 419 s
  set_tests_properties(mpi_${name} PROPERTIES LABELS mpi TIMEOUT 1800 SKIP_RETURN_CODE 77
                       ENVIRONMENT "${SLUICE_TEST_ENV};SLUICE_MPIEXEC=${SLUICE_MPIEXEC};SLUICE_PYTHON=/usr/bin/python3")
endforeach()

foreach(frag tests/python/tests.cmake tests/jobs/tests.cmake tests/report/tests.cmake)
  if(EXISTS ${PROJECT_SOURCE_DIR}/${frag})
    include(${PROJECT_SOURCE_DIR}/${frag})
  endif()
endforeach()

# examples: build + twin cross-read + exact optimum + every method (1 rank here;
# the rank-count comparisons live in tests/mpi)
if(EXISTS ${PROJECT_SOURCE_DIR}/tests/python/test_examples.py)
  add_test(NAME py_examples COMMAND /usr/bin/python3 ${PROJECT_SOURCE_DIR}/tests/python/test_examples.py
           $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_examples)
  # (the turbine-wear twin's own checks run inside py_examples, before it
  # serves as the reference; a test of the twin alone would test no product)
  set_tests_properties(py_examples PROPERTIES LABELS python TIMEOUT 600
                       ENVIRONMENT "${SLUICE_TEST_ENV}")
endif()

# a bounded libFuzzer run over the CSV readers (fails without clang: required)
add_test(NAME fuzz_csv COMMAND bash ${PROJECT_SOURCE_DIR}/tests/fuzz/run.sh ${PROJECT_SOURCE_DIR}
         ${PROJECT_BINARY_DIR}/fuzz_csv 45)
set_tests_properties(fuzz_csv PROPERTIES LABELS fuzz TIMEOUT 300)
# the model validation (dataset contents after HDF5 read them): crash
# regressions and corpus replayed, then a bounded run
add_test(NAME fuzz_validate COMMAND bash ${PROJECT_SOURCE_DIR}/tests/fuzz/run_validate.sh ${PROJECT_SOURCE_DIR}
         ${PROJECT_BINARY_DIR}/fuzz_validate 30)
set_tests_properties(fuzz_validate PROPERTIES LABELS fuzz TIMEOUT 300)
# the text a user types to name a factor value or a state (--start, --fix),
# the CSV files keyed by state (start distributions, rules), and the
# contents of solution, values, stage and checkpoint files after HDF5 read
# them, and build --param NAME=VALUE: crash regressions and corpus replayed,
# then a bounded run
foreach(target parse statecsv solution param)
  add_test(NAME fuzz_${target} COMMAND bash ${PROJECT_SOURCE_DIR}/tests/fuzz/run_target.sh ${PROJECT_SOURCE_DIR}
           ${PROJECT_BINARY_DIR}/fuzz_${target} ${target} 30)
  set_tests_properties(fuzz_${target} PROPERTIES LABELS fuzz TIMEOUT 300)
endforeach()

# the library API on 2 and 3 ranks (rows on rank 0 only; solving spreads nothing:
# the same numbers must come out)
foreach(np 2 3)
  add_test(NAME mpi_unit_handles_${np} COMMAND ${SLUICE_MPIEXEC} -np ${np} ${SLUICE_MPI_FLAGS} $<TARGET_FILE:test_handles>)
  set_tests_properties(mpi_unit_handles_${np} PROPERTIES LABELS mpi TIMEOUT 300 ENVIRONMENT "${SLUICE_TEST_ENV}")
endforeach()
# zlib is the reference for the reader's bound on a stored chunk (test_zlib_bound)
find_package(ZLIB)
if(NOT ZLIB_FOUND)
  message(FATAL_ERROR "zlib not found: install the Debian package zlib1g-dev")
endif()
target_link_libraries(test_chunk_read PRIVATE ZLIB::ZLIB)
# the direct chunk reader against H5Dread with the rows spread over ranks
foreach(np 2 3)
  add_test(NAME mpi_unit_chunk_read_${np} COMMAND ${SLUICE_MPIEXEC} -np ${np} ${SLUICE_MPI_FLAGS} $<TARGET_FILE:test_chunk_read>)
  set_tests_properties(mpi_unit_chunk_read_${np} PROPERTIES LABELS mpi TIMEOUT 300 ENVIRONMENT "${SLUICE_TEST_ENV}")
endforeach()
# the halo plan against one worked out by the test, both ways of finding it
foreach(np 2 3)
  add_test(NAME mpi_unit_halo_${np} COMMAND ${SLUICE_MPIEXEC} -np ${np} ${SLUICE_MPI_FLAGS} $<TARGET_FILE:test_halo>)
  set_tests_properties(mpi_unit_halo_${np} PROPERTIES LABELS mpi TIMEOUT 300 ENVIRONMENT "${SLUICE_TEST_ENV}")
endforeach()
# the optimised sweep paths against the reference sweep with the rows spread
# over ranks (stage-interleaved and not)
foreach(np 2 3)
  add_test(NAME mpi_staged_kernel_${np} COMMAND ${SLUICE_MPIEXEC} -np ${np} ${SLUICE_MPI_FLAGS} $<TARGET_FILE:test_kernel>)
  set_tests_properties(mpi_staged_kernel_${np} PROPERTIES LABELS mpi TIMEOUT 300 ENVIRONMENT "${SLUICE_TEST_ENV}")
endforeach()
