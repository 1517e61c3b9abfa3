#!/usr/bin/env bash
# Installs what the Windows x86-64 cross build and its tests under Wine need, on an x86-64
# Debian host, from Debian's packages only: the MinGW-w64 cross compiler with the posix thread
# model (std::thread, std::mutex), zlib built for Windows, Wine to run the programs, and
# GoogleTest's sources (compiled for the target by cmake/dependencies.cmake). The header-only
# libraries (xsimd, FlatBuffers, nlohmann-json, CLI11) and flatc are the host's, from
# scripts/install-deps.sh. Kept apart from install-deps.sh so that a normal build stays light.
# Idempotent: installs only what is missing.
set -euo pipefail

PACKAGES=(g++-mingw-w64-x86-64-posix libz-mingw-w64-dev wine64 wine googletest pkg-config)

SUDO=""
if [ "$(id -u)" -ne 0 ]; then
  SUDO="sudo"
fi

installed() {
  [[ "$(dpkg-query -W -f='${Status}' "$1" 2>/dev/null)" == *"install ok installed"* ]]
}

missing=()
for p in "${PACKAGES[@]}"; do
  installed "$p" || missing+=("$p")
done
if [ ${#missing[@]} -eq 0 ]; then
  exit 0
fi
echo "sprig: installing missing Debian packages: ${missing[*]}"
$SUDO apt-get update -qq
DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends \
  -o DPkg::Lock::Timeout=600 "${missing[@]}"
