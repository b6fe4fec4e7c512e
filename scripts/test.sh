#!/usr/bin/env bash
# The whole test suite: install what is missing, then every test in release mode
# (statistical tests need optimised code). Runs as root too (mpirun is told it may).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/system-packages.sh
export OMPI_ALLOW_RUN_AS_ROOT=1 OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1 OMPI_MCA_rmaps_base_oversubscribe=1
# The config, physics and engine-core layers alone, without MPI, HDF5 or plotters.
cargo test --release --no-default-features --lib
cargo test --release "$@"
