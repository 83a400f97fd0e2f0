#!/usr/bin/env bash
# Set up the MPI solver path (modes.method = "mpi", `shellmodes run CASE --ranks N`).
#
# PETSc and SLEPc have no binary wheels for every Python, so this uses the Debian/Ubuntu
# packages (PETSc, SLEPc, MUMPS, Open MPI and their Python bindings), which are built for the
# system Python /usr/bin/python3.  It makes a virtual environment from that Python which sees
# the system packages (--system-site-packages) and installs this project into it, editable.
#
# Needs root (or sudo) for apt-get.  Usage:
#     scripts/setup-mpi.sh [VENV]          (default VENV: .venv-mpi in the project folder)
#     . VENV/bin/activate                  (sets PETSC_DIR and SLEPC_DIR too)
#     shellmodes run CASE --ranks 2
set -euo pipefail
cd "$(dirname "$0")/.."
VENV=${1:-.venv-mpi}
EXTRAS=${SHELLMODES_MPI_EXTRAS:-test}

newest() { ls -d $1 2>/dev/null | sort -V | tail -n 1; }
installed() {  # the bindings import only with PETSC_DIR and SLEPC_DIR set
    PETSC_DIR=$(newest "/usr/lib/petscdir/petsc3*/*-linux-gnu-real") \
    SLEPC_DIR=$(newest "/usr/lib/slepcdir/slepc3*/*-linux-gnu-real") \
        /usr/bin/python3 -c "import slepc4py, petsc4py, mpi4py" 2>/dev/null && command -v mpiexec >/dev/null
}
if ! installed; then
    SUDO=""
    if [ "$(id -u)" -ne 0 ]; then SUDO="sudo"; fi
    $SUDO apt-get update -q
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -q --no-install-recommends \
        python3-slepc4py python3-slepc4py-real python3-petsc4py python3-petsc4py-real python3-mpi4py \
        python3-venv mpi-default-bin
fi

# The real-scalar trees the bindings load: the newest installed build under /usr/lib/petscdir and
# /usr/lib/slepcdir (the bindings' .pth files read PETSC_DIR and SLEPC_DIR to find them).
PETSC_DIR=${PETSC_DIR:-$(newest "/usr/lib/petscdir/petsc3*/*-linux-gnu-real")}
SLEPC_DIR=${SLEPC_DIR:-$(newest "/usr/lib/slepcdir/slepc3*/*-linux-gnu-real")}
if [ -z "$PETSC_DIR" ] || [ -z "$SLEPC_DIR" ]; then
    echo "setup-mpi: no real-scalar PETSc/SLEPc build found under /usr/lib/petscdir, /usr/lib/slepcdir" >&2
    exit 1
fi
export PETSC_DIR SLEPC_DIR

if [ ! -x "$VENV/bin/python" ]; then
    /usr/bin/python3 -m venv --system-site-packages "$VENV"
fi
# petsc4py is compiled against the system numpy 1.x: a numpy 2 in the environment would break it
echo "numpy<2" > "$VENV/constraints.txt"
"$VENV/bin/python" -m pip install -q --upgrade pip
"$VENV/bin/python" -m pip install -q -c "$VENV/constraints.txt" -e ".[$EXTRAS]"

# The environment's Python sets the variables the PETSc/SLEPc bindings need, activated or not (the system
# packages' .pth files read them; this file is read first, being in the environment's own site folder), and
# so do the MPI ranks it starts.
SITE=$("$VENV/bin/python" -c "import sysconfig; print(sysconfig.get_paths()['purelib'])")
cat > "$SITE/00-shellmodes-petsc.pth" <<PTH
import os; os.environ.setdefault("PETSC_DIR", "$PETSC_DIR"); os.environ.setdefault("SLEPC_DIR", "$SLEPC_DIR")
PTH
# activate sets them too (for tools started from the shell)
if ! grep -q "setup-mpi.sh" "$VENV/bin/activate"; then
    {
        echo ""
        echo "# added by scripts/setup-mpi.sh: the PETSc/SLEPc trees of the system packages"
        echo "export PETSC_DIR=$PETSC_DIR"
        echo "export SLEPC_DIR=$SLEPC_DIR"
    } >> "$VENV/bin/activate"
fi

"$VENV/bin/python" - <<'PY'
from mpi4py import MPI
from petsc4py import PETSc
from slepc4py import SLEPc
print("PETSc", ".".join(map(str, PETSc.Sys.getVersion())), "scalar", PETSc.ScalarType.__name__,
      "| SLEPc", ".".join(map(str, SLEPc.Sys.getVersion())), "|", MPI.Get_library_version().splitlines()[0])
PY
echo "ready: . $VENV/bin/activate && shellmodes run CASE --ranks 2"
