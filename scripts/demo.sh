#!/usr/bin/env bash
# Set up, build, and run the embedded default sweep on 2 MPI ranks:
# writes out/default.h5, out/default_maps.png and the Bloch bands of one
# point, out/default_bands.png, and prints summary tables;
# then the exact entanglement example (examples/entanglement.toml):
# out/entanglement.h5 and out/entanglement_curves.png.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/bootstrap.sh
bash scripts/build.sh
source scripts/env.sh
mkdir -p out
mpiexec --oversubscribe -n 2 build/toral run -o out/default.h5 --overwrite
"$TORAL_PYTHON" analysis/toral_maps.py out/default.h5 --sweep shear_grid -o out/default_maps.png --table
# shear_grid point a = -3, b = 3: elliptic on part of the zone, hyperbolic on the rest
"$TORAL_PYTHON" analysis/toral_bands.py out/default.h5 --point 6 -o out/default_bands.png --table
mpiexec --oversubscribe -n 2 build/toral run examples/entanglement.toml -o out/entanglement.h5 --overwrite -q
"$TORAL_PYTHON" analysis/toral_curves.py out/entanglement.h5 --point 17 -o out/entanglement_curves.png
echo "wrote out/default.h5, out/default_maps.png, out/default_bands.png, out/entanglement.h5 and out/entanglement_curves.png"
