# tests/jobs/tests.cmake - batch job scripts: stand-ins for Slurm and PBS
# signal sequences, and a real single-node Slurm when slurm-wlm is installed.
# One 480,000-state reservoir model serves all three: a solve must last long
# enough (seconds) for the signal sequence to land mid-run.
set(_jobs_dir ${PROJECT_BINARY_DIR}/jobs)
add_test(NAME jobs_model_slurm
         COMMAND $<TARGET_FILE:sluice> build ${PROJECT_SOURCE_DIR}/examples/reservoir.c
                 --param storage_levels=2000 --param inflow_classes=20 -o ${_jobs_dir}/slurm.h5 -q)
file(MAKE_DIRECTORY ${_jobs_dir})
set_tests_properties(jobs_model_slurm PROPERTIES FIXTURES_SETUP jobs_big ENVIRONMENT "${SLUICE_TEST_ENV}")

add_test(NAME jobs_slurm_standin COMMAND bash ${PROJECT_SOURCE_DIR}/tests/jobs/standin_test.sh
         $<TARGET_FILE:sluice> ${_jobs_dir}/slurm.h5 ${_jobs_dir}/standin)
add_test(NAME jobs_pbs_standin COMMAND bash ${PROJECT_SOURCE_DIR}/tests/jobs/pbs_standin_test.sh
         $<TARGET_FILE:sluice> ${_jobs_dir}/slurm.h5 ${_jobs_dir}/pbs)
add_test(NAME jobs_slurm_real COMMAND bash ${PROJECT_SOURCE_DIR}/tests/jobs/slurm_test.sh
         $<TARGET_FILE:sluice> ${_jobs_dir}/slurm.h5 ${_jobs_dir}/slurm)
set_tests_properties(jobs_slurm_standin jobs_pbs_standin PROPERTIES LABELS jobs TIMEOUT 1800
                     RUN_SERIAL TRUE FIXTURES_REQUIRED jobs_big
                     ENVIRONMENT "${SLUICE_TEST_ENV}")
# the PBS chain solves with Jacobi (see pbs_standin_test.sh): 805 s at load 8
set_tests_properties(jobs_pbs_standin PROPERTIES TIMEOUT 2700)
set_tests_properties(jobs_slurm_real PROPERTIES LABELS jobs TIMEOUT 3000 SKIP_RETURN_CODE 77
                     RUN_SERIAL TRUE FIXTURES_REQUIRED jobs_big ENVIRONMENT "${SLUICE_TEST_ENV}")
