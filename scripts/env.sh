# Sourced by the scripts: lets OpenMPI run as root (containers, CI) and allows
# more ranks than cores on small machines. Harmless for ordinary users.
export OMPI_ALLOW_RUN_AS_ROOT=1
export OMPI_ALLOW_RUN_AS_ROOT_CONFIRM=1
export OMPI_MCA_rmaps_base_oversubscribe=1
# Debian's python3 has h5py/numpy/matplotlib; a pyenv python3 may not.
TORAL_PYTHON=/usr/bin/python3
