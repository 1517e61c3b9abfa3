# Cross build for 64-bit Windows with Debian's MinGW-w64 (the posix thread model, package
# g++-mingw-w64-x86-64-posix); scripts/install-windows-deps.sh installs it and the rest:
#   cmake -S . -B build-windows -DCMAKE_TOOLCHAIN_FILE=cmake/toolchain-x86_64-w64-mingw32.cmake
# The target's libraries (zlib from libz-mingw-w64-dev, the MinGW runtime) live under
# /usr/x86_64-w64-mingw32. The header-only libraries come from the host's /usr/include through
# cmake/dependencies.cmake, never by adding /usr/include itself, which would put the host's C
# library headers in front of MinGW's. Programs run at build time (flatc, Python) are the host's.
set(CMAKE_SYSTEM_NAME Windows)
set(CMAKE_SYSTEM_PROCESSOR x86_64)

set(SPRIG_MINGW_PREFIX x86_64-w64-mingw32)
set(CMAKE_C_COMPILER ${SPRIG_MINGW_PREFIX}-gcc-posix)
set(CMAKE_CXX_COMPILER ${SPRIG_MINGW_PREFIX}-g++-posix)
set(CMAKE_RC_COMPILER ${SPRIG_MINGW_PREFIX}-windres)
set(CMAKE_NM ${SPRIG_MINGW_PREFIX}-nm)

set(CMAKE_FIND_ROOT_PATH /usr/${SPRIG_MINGW_PREFIX})
set(CMAKE_FIND_ROOT_PATH_MODE_PROGRAM NEVER)
set(CMAKE_FIND_ROOT_PATH_MODE_LIBRARY ONLY)
set(CMAKE_FIND_ROOT_PATH_MODE_INCLUDE ONLY)
set(CMAKE_FIND_ROOT_PATH_MODE_PACKAGE ONLY)

# Self-contained programs and DLL: the GCC runtime, the C++ library and winpthreads are linked
# in, so nothing but Windows' own DLLs (and msvcrt) has to travel with sprig.dll or sprig.exe.
set(CMAKE_EXE_LINKER_FLAGS_INIT "-static")
set(CMAKE_SHARED_LINKER_FLAGS_INIT "-static")
set(CMAKE_MODULE_LINKER_FLAGS_INIT "-static")

# Tests (ctest, and the test discovery at build time) run under Wine (wine64 from Debian),
# through cmake/wine-run.sh, which keeps Wine quiet and the output's line ends plain.
find_program(SPRIG_WINE wine)
if(SPRIG_WINE)
  set(CMAKE_CROSSCOMPILING_EMULATOR "${CMAKE_CURRENT_LIST_DIR}/wine-run.sh")
endif()
