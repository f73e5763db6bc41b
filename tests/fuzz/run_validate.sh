#!/usr/bin/env bash
# The model-validation fuzz target (tests/fuzz/fuzz_validate.c) through the
# one script that builds, replays and runs every such target.
# usage: run_validate.sh SOURCE_DIR WORKDIR [SECONDS]
# Documented bounded run: bash tests/fuzz/run_validate.sh . /tmp/fz 300
exec bash "$(dirname "$0")/run_target.sh" "$1" "$2" validate "${3:-30}"
