#!/bin/sh
# End to end on a physical scenario: the capacitance of a thin square plate from the
# boundary-element system tools/plate_capacitance.py writes, solved by gridlu on 2 ranks,
# must land within 2 % of the reference value (see REFERENCE in that script).
# Usage: plate_capacitance.sh PYTHON GRIDLU MPIEXEC TOOLS_DIR
set -eu
python=$1 gridlu=$2 mpiexec=$3 tools=$4
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
"$python" "$tools/plate_capacitance.py" write --panels 24 "$work/plate.h5"
"$mpiexec" -q -n 2 "$gridlu" solve "$work/plate.h5" --out "$work/charges.h5" --quiet
"$python" "$tools/plate_capacitance.py" read "$work/plate.h5" "$work/charges.h5" --tolerance 0.02
