#!/usr/bin/env bash
# Installs the Debian packages sprig needs to build, test and benchmark.
# Only packages that are missing are installed; nothing is fetched from anywhere but apt.
set -euo pipefail

PACKAGES=(
  build-essential cmake pkg-config git
  libxsimd-dev libflatbuffers-dev flatbuffers-compiler
  nlohmann-json3-dev libcli11-dev zlib1g-dev
  libgtest-dev libgmock-dev googletest libbenchmark-dev libopenblas-dev
  python3-numpy python3-torch python3-sklearn python3-flatbuffers
  clang clang-format libclang-rt-14-dev ccache
  libsentencepiece-dev python3-sentencepiece sentencepiece
  chromium
)

missing=()
for p in "${PACKAGES[@]}"; do
  if ! [[ "$(dpkg-query -W -f='${Status}' "$p" 2>/dev/null)" == *"install ok installed"* ]]; then
    missing+=("$p")
  fi
done

if [ ${#missing[@]} -eq 0 ]; then
  exit 0
fi

echo "sprig: installing missing Debian packages: ${missing[*]}"
SUDO=""
if [ "$(id -u)" -ne 0 ]; then
  SUDO="sudo"
fi
$SUDO apt-get update -qq
DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends \
  -o DPkg::Lock::Timeout=600 "${missing[@]}"
