#!/usr/bin/env bash
# Install the system libraries signfold builds against (Debian/Ubuntu), only when missing:
# OpenMPI, parallel HDF5 (OpenMPI flavour), the HDF5 command-line tools, libclang (for the
# MPI bindings) and pkg-config.
set -euo pipefail
packages=(libopenmpi-dev openmpi-bin libhdf5-openmpi-dev hdf5-tools libclang-dev pkg-config)
missing=()
for p in "${packages[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ ${#missing[@]} -eq 0 ]; then
  exit 0
fi
echo "installing system packages: ${missing[*]}"
if [ "$(id -u)" -eq 0 ]; then sudo=""; else sudo="sudo"; fi
export DEBIAN_FRONTEND=noninteractive
$sudo apt-get update -qq
$sudo apt-get install -y -qq "${missing[@]}"
