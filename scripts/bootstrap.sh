#!/usr/bin/env bash
# Idempotent set-up of the Debian packages toral needs to build, test and plot.
# Does nothing when every package is already installed.
set -euo pipefail

PACKAGES=(
  build-essential cmake pkg-config git
  openmpi-bin libopenmpi-dev
  petsc-dev slepc-dev
  libhdf5-openmpi-dev hdf5-tools
  liblapacke-dev libopenblas-dev
  libgsl-dev librandom123-dev
  libflint-dev libflint-arb-dev libm4ri-dev
  libtomlplusplus-dev libcli11-dev
  googletest libgtest-dev valgrind
  python3 python3-h5py python3-numpy python3-scipy python3-matplotlib python3-pytest
  python3-sympy python3-mpmath python3-xarray python3-h5netcdf
)

missing=()
for p in "${PACKAGES[@]}"; do
  if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
    missing+=("$p")
  fi
done

if [ ${#missing[@]} -eq 0 ]; then
  echo "toral bootstrap: all ${#PACKAGES[@]} packages present"
  exit 0
fi

echo "toral bootstrap: installing ${missing[*]}"
SUDO=""
if [ "$(id -u)" -ne 0 ]; then SUDO="sudo"; fi
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends "${missing[@]}"
echo "toral bootstrap: done"
