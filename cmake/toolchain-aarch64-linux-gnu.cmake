# Cross build for 64-bit ARM Linux with Debian's cross compiler (g++-aarch64-linux-gnu) and the
# arm64 libraries of Debian multiarch (scripts/install-arm-deps.sh installs both):
#   cmake -S . -B build-arm64 -DCMAKE_TOOLCHAIN_FILE=cmake/toolchain-aarch64-linux-gnu.cmake
# Multiarch puts the arm64 libraries and their CMake package files under
# /usr/lib/aarch64-linux-gnu of the host itself, so there is no separate sysroot: CMake finds
# them through CMAKE_LIBRARY_ARCHITECTURE. Programs run at build time (flatc) are the host's.
set(CMAKE_SYSTEM_NAME Linux)
set(CMAKE_SYSTEM_PROCESSOR aarch64)
set(CMAKE_LIBRARY_ARCHITECTURE aarch64-linux-gnu)

set(CMAKE_C_COMPILER aarch64-linux-gnu-gcc)
set(CMAKE_CXX_COMPILER aarch64-linux-gnu-g++)

# Keep the host's x86-64 library folders out of every library and package search.
set(CMAKE_IGNORE_PATH /usr/lib/x86_64-linux-gnu /lib/x86_64-linux-gnu
                      /usr/lib/x86_64-linux-gnu/cmake)
set(CMAKE_FIND_ROOT_PATH_MODE_PROGRAM NEVER)

# Test programs (ctest, and the test discovery at build time) run under user-mode QEMU. The
# arm64 C library of multiarch (libc6:arm64) provides the loader at its usual path, so QEMU
# needs no -L prefix, and the loader finds the multiarch libraries in its default folders.
find_program(SPRIG_QEMU_AARCH64 qemu-aarch64)
if(SPRIG_QEMU_AARCH64)
  set(CMAKE_CROSSCOMPILING_EMULATOR "${SPRIG_QEMU_AARCH64}")
endif()
