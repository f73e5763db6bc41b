# tests/python/tests.cmake - Python cross-checks of sluice against outside sources
# (scipy LP and sparse solvers, published worked examples). Included from the
# top-level CMakeLists.txt; paths are relative to PROJECT_SOURCE_DIR.
#
# The interpreter must have numpy, scipy (with HiGHS linprog) and h5py; on
# Debian that is /usr/bin/python3 with python3-numpy python3-scipy python3-h5py.
# Override with -DSLUICE_TEST_PYTHON=/path/to/python3.

set(SLUICE_TEST_PYTHON /usr/bin/python3 CACHE FILEPATH
    "python3 with numpy, scipy and h5py for the tests/python cross-checks")

execute_process(
  COMMAND ${SLUICE_TEST_PYTHON} -c "import numpy, scipy.optimize, scipy.sparse.linalg, h5py"
  RESULT_VARIABLE _sluice_py_ok OUTPUT_QUIET ERROR_QUIET)

if(NOT _sluice_py_ok EQUAL 0)
  # Required by the README: registered as a test that fails with the reason,
  # instead of silently leaving the cross-checks out.
  message(WARNING "tests/python: ${SLUICE_TEST_PYTHON} lacks numpy/scipy/h5py; py_prerequisites will fail "
                  "(Debian packages python3-numpy python3-scipy python3-h5py)")
  add_test(NAME py_prerequisites COMMAND ${SLUICE_TEST_PYTHON} -c "import numpy, scipy.optimize, scipy.sparse.linalg, h5py")
  set_tests_properties(py_prerequisites PROPERTIES LABELS python)
else()
  set(_sluice_py_dir ${PROJECT_SOURCE_DIR}/tests/python)
  foreach(_t lp evaluate published certificate bounds estimate units simulate)
    add_test(NAME py_${_t}
      COMMAND ${SLUICE_TEST_PYTHON} ${_sluice_py_dir}/test_${_t}.py
              $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_${_t})
    set_tests_properties(py_${_t} PROPERTIES LABELS python TIMEOUT 300)
  endforeach()

  # Tables, outlooks and totals of issue 9 (each runs 1, 2 and 3 ranks itself)
  foreach(_t table outlook totals rule)
    add_test(NAME py_${_t}
      COMMAND ${SLUICE_TEST_PYTHON} ${_sluice_py_dir}/test_${_t}.py
              $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_${_t})
    set_tests_properties(py_${_t} PROPERTIES LABELS "python;mpi" TIMEOUT 600
      ENVIRONMENT "SLUICE_CACHE=${PROJECT_BINARY_DIR}/test-cache;OMPI_ALLOW_RUN_AS_ROOT=1;OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1")
  endforeach()
  # finite / total / average objectives (docs/objectives.md); the rank and
  # resume comparisons launch mpiexec themselves
  add_test(NAME py_objectives
    COMMAND ${SLUICE_TEST_PYTHON} ${_sluice_py_dir}/test_objectives.py
            $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_objectives)
  set_tests_properties(py_objectives PROPERTIES LABELS python TIMEOUT 600
    ENVIRONMENT "OBJ_PARTS=finite,total,average,pi")
  # policy iteration falling back when the direct solve is declined, and
  # checkpoints of the total/average objectives (1 and 2 ranks)
  add_test(NAME py_objectives_more
    COMMAND ${SLUICE_TEST_PYTHON} ${_sluice_py_dir}/test_objectives.py
            $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_objectives_more)
  set_tests_properties(py_objectives_more PROPERTIES LABELS "python;mpi" TIMEOUT 900
    ENVIRONMENT "OBJ_PARTS=fallback,checkpoints,generator;SLUICE_CACHE=${PROJECT_BINARY_DIR}/test-cache;SLUICE_MPIEXEC=${MPIEXEC_EXECUTABLE};OMPI_ALLOW_RUN_AS_ROOT=1;OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1;OMPI_MCA_rmaps_base_oversubscribe=1")
  # policy iteration of total/average: checkpoints, signals, resume (1 and
  # 2 ranks), and the fallback after one direct solve
  add_test(NAME py_objectives_pi
    COMMAND ${SLUICE_TEST_PYTHON} ${_sluice_py_dir}/test_objectives.py
            $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_objectives_pi)
  set_tests_properties(py_objectives_pi PROPERTIES LABELS "python;mpi" TIMEOUT 900
    ENVIRONMENT "OBJ_PARTS=pi_checkpoints,pi_midway;SLUICE_CACHE=${PROJECT_BINARY_DIR}/test-cache;SLUICE_MPIEXEC=${MPIEXEC_EXECUTABLE};OMPI_ALLOW_RUN_AS_ROOT=1;OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1;OMPI_MCA_rmaps_base_oversubscribe=1")
  # a signal pinned before a sweep boundary of known parity (deterministic
  # where cli_checkpoint_signals relies on when a busy machine delivers it)
  add_test(NAME py_signal_boundary
    COMMAND ${SLUICE_TEST_PYTHON} ${_sluice_py_dir}/test_signal_boundary.py
            $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_signal_boundary)
  set_tests_properties(py_signal_boundary PROPERTIES LABELS python TIMEOUT 300)
  add_test(NAME py_objectives_ranks
    COMMAND ${SLUICE_TEST_PYTHON} ${_sluice_py_dir}/test_objectives.py
            $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_objectives_ranks)
  set_tests_properties(py_objectives_ranks PROPERTIES LABELS "python;mpi" TIMEOUT 900
    ENVIRONMENT "OBJ_PARTS=ranks;SLUICE_MPIEXEC=${MPIEXEC_EXECUTABLE};OMPI_ALLOW_RUN_AS_ROOT=1;OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1;OMPI_MCA_rmaps_base_oversubscribe=1")

  # The LP and certificate checks again with 2 MPI ranks (every command that
  # reads or writes a model uses all ranks under mpirun).
  if(MPIEXEC_EXECUTABLE)
    foreach(_t lp certificate)
      add_test(NAME py_${_t}_np2
        COMMAND ${SLUICE_TEST_PYTHON} ${_sluice_py_dir}/test_${_t}.py
                $<TARGET_FILE:sluice> ${PROJECT_BINARY_DIR}/py_${_t}_np2)
      set_tests_properties(py_${_t}_np2 PROPERTIES LABELS "python;mpi" TIMEOUT 600
        ENVIRONMENT "SLUICE_LAUNCH=${MPIEXEC_EXECUTABLE} ${MPIEXEC_NUMPROC_FLAG} 2 --oversubscribe;OMPI_ALLOW_RUN_AS_ROOT=1;OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1")
    endforeach()
  endif()
endif()
