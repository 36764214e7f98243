#!/usr/bin/env bash
# Idempotent set-up: installs the system packages isosbestic needs to build and test, only when
# they are missing. Safe to run again and again; it does nothing when everything is present.
#
#   libopenblas-dev        static libopenblas.a (linked by .cargo/config.toml)
#   libgfortran-<gcc>-dev  libgfortran.so for OpenBLAS's Fortran LAPACK
#   chromium               headless rendering check of report.html in the test suite
#                          (set ISOSBESTIC_SKIP_BROWSER=1 to skip installing and that test)
set -euo pipefail

gcc_major=$(gcc -dumpversion 2>/dev/null | cut -d. -f1 || true)
packages=(libopenblas-dev "libgfortran-${gcc_major:-12}-dev")
if [ "${ISOSBESTIC_SKIP_BROWSER:-0}" != "1" ]; then
  packages+=(chromium)
fi

missing=()
for p in "${packages[@]}"; do
  if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
    missing+=("$p")
  fi
done

if [ ${#missing[@]} -eq 0 ]; then
  echo "setup: system packages present (${packages[*]})"
  exit 0
fi

echo "setup: missing system packages: ${missing[*]}"
if ! command -v apt-get >/dev/null 2>&1; then
  echo "setup: cannot install them: apt-get not found. Install the equivalents of ${missing[*]}" >&2
  echo "       (OpenBLAS static archive and libgfortran) with your system's package manager." >&2
  exit 1
fi
if [ "$(id -u)" -ne 0 ]; then
  if command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then
    SUDO=sudo
  else
    echo "setup: cannot install them: not root and no password-less sudo. Run as root:" >&2
    echo "       apt-get update && apt-get install -y ${missing[*]}" >&2
    exit 1
  fi
else
  SUDO=
fi
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends "${missing[@]}"
echo "setup: installed ${missing[*]}"
