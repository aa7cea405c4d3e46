#!/bin/sh
# Installs the Debian packages gridlu needs to build, test and benchmark.
# Idempotent: does nothing when every package is already installed.
set -eu
# openssh-client: OpenMPI looks for ssh at start-up even for runs on one machine.
# gfortran: the Fortran module over the C interface.
# slurm-wlm (slurmctld, slurmd, slurm-client) and munge: the test of jobs/ runs a private
# one-node Slurm of its own; it needs none of these packages' system services.
packages="build-essential gfortran cmake pkg-config openssh-client
  openmpi-bin libopenmpi-dev
  libopenblas-dev liblapacke-dev
  libhdf5-openmpi-dev hdf5-tools
  googletest libgtest-dev libcli11-dev nlohmann-json3-dev
  python3 python3-numpy python3-h5py python3-matplotlib
  slurm-wlm munge"
missing=""
for p in $packages; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing="$missing $p"
done
[ -z "$missing" ] && exit 0
[ "$(id -u)" -eq 0 ] && sudo="" || sudo="sudo"
echo "gridlu: installing$missing"
$sudo apt-get update -q
DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -q --no-install-recommends $missing
