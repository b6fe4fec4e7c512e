#!/usr/bin/env bash
# Quick start: install what is missing, build, run the fermion-pair demo and draw it.
# Results go to ./demo-fermion-pair (overwritten on each call of this script).
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/system-packages.sh
cargo build --release
out=demo-fermion-pair
./target/release/signfold check jobs/fermion-pair.toml
./target/release/signfold run jobs/fermion-pair.toml --out "$out" --force
./target/release/signfold plot "$out/observables.h5" --out "$out/plots"
echo "results: $out/observables.h5, pictures: $out/plots/"
