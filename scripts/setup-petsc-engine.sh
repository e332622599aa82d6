#!/usr/bin/env bash
# Build the environment of the PETSc engine (conditioning --engine petsc) on
# Debian bookworm, as root:
#   1. Debian's petsc4py/slepc4py (PETSc 3.18 with MUMPS), mpi4py, Open MPI,
#      the pthreads OpenBLAS (MUMPS on the reference BLAS is several times slower);
#   2. VENV from Debian's /usr/bin/python3 with --system-site-packages, so that
#      Debian's numpy 1.24 (the ABI petsc4py was compiled for) is the numpy;
#   3. a .pth file naming petsc4py's and slepc4py's dist-packages folders
#      (without the -dev packages there is no /usr/lib/petsc link, which
#      Debian's own .pth files rely on);
#   4. this project with its test extra, pinned by petsc-engine-constraints.txt.
# Safe to run again; stops at the first failure.
#
# usage: scripts/setup-petsc-engine.sh VENV
set -euo pipefail

if [ $# -ne 1 ]; then
    echo "usage: $0 VENV" >&2
    exit 2
fi
venv=$1
here=$(cd "$(dirname "$0")" && pwd)
project=$(cd "$here/.." && pwd)
constraints="$here/petsc-engine-constraints.txt"
say() { echo "setup-petsc-engine: $*"; }
die() { echo "setup-petsc-engine: ERROR: $*" >&2; exit 1; }

# 1. System packages (skipped when all are installed already).
packages="python3-petsc4py python3-slepc4py python3-mpi4py openmpi-bin python3-venv libopenblas0-pthread"
missing=""
for p in $packages; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing="$missing $p"
done
if [ -n "$missing" ]; then
    [ "$(id -u)" -eq 0 ] || die "missing Debian packages:$missing; run this script as root"
    command -v apt-get >/dev/null || die "apt-get not found: this script needs Debian bookworm"
    say "installing$missing"
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends $packages >/dev/null
else
    say "Debian packages already installed"
fi

# 2. The virtual environment on Debian's interpreter.
if [ -x "$venv/bin/python" ]; then
    grep -qx "include-system-site-packages = true" "$venv/pyvenv.cfg" \
        || die "$venv exists but was not made with --system-site-packages; remove it first"
    [ "$("$venv/bin/python" -c 'import sys; print(sys.base_prefix)')" = /usr ] \
        || die "$venv exists but is not on Debian's /usr/bin/python3; remove it first"
    say "reusing $venv"
else
    /usr/bin/python3 -m venv --system-site-packages "$venv"
fi
py="$venv/bin/python"

# 3. petsc4py and slepc4py from their dist-packages folders, found with dpkg.
folder_of() {  # the dist-packages folder that holds MODULE/__init__.py, from dpkg's file lists
    dpkg -S "*/lib/python3/dist-packages/$1/__init__.py" 2>/dev/null \
        | sed -n 's|^[^:]*: \(.*\)/'"$1"'/__init__.py$|\1|p' | grep -v '^/usr/lib/python3/' | head -n 1
}
petsc_dir=$(folder_of petsc4py)
slepc_dir=$(folder_of slepc4py)
[ -d "$petsc_dir" ] || die "petsc4py's folder not found under /usr/lib/petscdir (dpkg -S petsc4py/__init__.py)"
[ -d "$slepc_dir" ] || die "slepc4py's folder not found under /usr/lib/slepcdir (dpkg -S slepc4py/__init__.py)"
site=$("$py" -c 'import sysconfig; print(sysconfig.get_paths()["purelib"])')
printf '%s\n%s\n' "$petsc_dir" "$slepc_dir" > "$site/conditioning-petsc-engine.pth"
say "petsc4py from $petsc_dir"
say "slepc4py from $slepc_dir"

# 4. The project, with numpy held at Debian's version.
"$py" -m pip install --quiet -c "$constraints" "$project[test]"

# Check: the bindings load with this numpy and MUMPS is there.
"$py" - <<'PY'
import numpy
from petsc4py import PETSc
from slepc4py import SLEPc
import conditioning
assert numpy.__version__.startswith("1.24"), f"numpy {numpy.__version__}, expected Debian's 1.24"
assert PETSc.Sys.hasExternalPackage("mumps"), "PETSc was built without MUMPS"
print("setup-petsc-engine: ok: numpy %s, PETSc %s, SLEPc %s, MUMPS present"
      % (numpy.__version__, ".".join(map(str, PETSc.Sys.getVersion())),
         ".".join(map(str, SLEPc.Sys.getVersion()))))
PY
