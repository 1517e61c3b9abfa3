#!/usr/bin/env bash
# Installs what the aarch64 cross build and its emulated tests need, on an x86-64 Debian host:
# Debian's cross compiler, user-mode QEMU, and the arm64 builds of the libraries sprig links
# (Debian multiarch). Kept apart from install-deps.sh so that a normal build stays light.
# Idempotent: adds the arm64 architecture only once and installs only what is missing.
#
# Multiarch keeps an :amd64 and an :arm64 copy of the same -dev package at one version, so apt
# may upgrade an installed :amd64 copy to match; --no-remove makes it fail rather than remove
# anything the native build needs.
set -euo pipefail

HOST_PACKAGES=(g++-aarch64-linux-gnu qemu-user flatbuffers-compiler)
# Header-only libraries (nlohmann-json, CLI11) are architecture-independent packages that the
# native install already provides. xsimd is header-only too, but its CMake package files live
# in the architecture's library folder, so the arm64 copy is needed for find_package.
ARM64_PACKAGES=(zlib1g-dev libflatbuffers-dev libgtest-dev
  libgmock-dev libxsimd-dev)

SUDO=""
if [ "$(id -u)" -ne 0 ]; then
  SUDO="sudo"
fi

installed() {
  [[ "$(dpkg-query -W -f='${Status}' "$1" 2>/dev/null)" == *"install ok installed"* ]]
}

missing=()
for p in "${HOST_PACKAGES[@]}"; do
  installed "$p" || missing+=("$p")
done
for p in "${ARM64_PACKAGES[@]}"; do
  installed "$p:arm64" || missing+=("$p:arm64")
done
if [ ${#missing[@]} -eq 0 ]; then
  exit 0
fi

if ! grep -qx arm64 <<< "$(dpkg --print-foreign-architectures)"; then
  echo "sprig: enabling the arm64 architecture for Debian multiarch"
  $SUDO dpkg --add-architecture arm64
fi
echo "sprig: installing missing Debian packages: ${missing[*]}"
$SUDO apt-get update -qq
DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends --no-remove \
  -o DPkg::Lock::Timeout=600 "${missing[@]}"
