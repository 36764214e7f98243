#!/usr/bin/env bash
# Proves the built binary carries OpenBLAS inside it: it must not need libopenblas.so at run time.
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --quiet --bin isosbestic
bin=target/debug/isosbestic
if readelf -d "$bin" | grep -E "NEEDED.*(openblas|libblas|liblapack)"; then
  echo "check-static-openblas: FAIL: $bin depends on a shared BLAS/LAPACK library" >&2
  exit 1
fi
if ! nm "$bin" | grep -E " T openblas_get_num_threads$" >/dev/null; then
  echo "check-static-openblas: FAIL: no OpenBLAS/LAPACK symbols inside $bin" >&2
  exit 1
fi
echo "check-static-openblas: ok ($bin needs no shared BLAS; OpenBLAS is linked in)"
