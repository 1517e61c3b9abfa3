# The libraries sprig builds with, from Debian's packages (scripts/install-deps.sh, and
# scripts/install-windows-deps.sh for the Windows cross build). Every folder links the targets
# named here: sprig_xsimd, sprig_flatbuffers, nlohmann_json::nlohmann_json, CLI11::CLI11,
# ZLIB::ZLIB, Threads::Threads, and for the tests GTest::gtest and GTest::gtest_main.

find_package(Threads REQUIRED)
find_package(ZLIB REQUIRED)
find_program(FLATC flatc REQUIRED)

# sprig_host_headers(<target> <dir>...): an INTERFACE target whose include root holds links to
# the host's /usr/include/<dir> folders and nothing else. The cross build takes header-only
# libraries this way: adding /usr/include itself would put the host's C library headers in
# front of the target's.
function(sprig_host_headers target)
  set(root ${PROJECT_BINARY_DIR}/host-headers/${target})
  file(MAKE_DIRECTORY ${root})
  foreach(dir ${ARGN})
    if(NOT EXISTS /usr/include/${dir})
      message(FATAL_ERROR "/usr/include/${dir} is missing (run scripts/install-windows-deps.sh)")
    endif()
    file(CREATE_LINK /usr/include/${dir} ${root}/${dir} SYMBOLIC)
  endforeach()
  add_library(${target} INTERFACE IMPORTED GLOBAL)
  target_include_directories(${target} SYSTEM INTERFACE ${root})
endfunction()

if(CMAKE_CROSSCOMPILING AND WIN32)
  # Header-only on every platform; no Windows build of them is packaged, and none is needed.
  sprig_host_headers(sprig_xsimd xsimd)
  sprig_host_headers(sprig_flatbuffers flatbuffers)
  sprig_host_headers(nlohmann_json::nlohmann_json nlohmann)
  sprig_host_headers(CLI11::CLI11 CLI)
  if(SPRIG_BUILD_TESTS)
    # Debian ships GoogleTest's sources (package googletest); they are compiled for the target.
    set(SPRIG_GTEST_SOURCE /usr/src/googletest/googletest)
    if(NOT EXISTS ${SPRIG_GTEST_SOURCE}/CMakeLists.txt)
      message(FATAL_ERROR "${SPRIG_GTEST_SOURCE} is missing (install Debian's googletest)")
    endif()
    add_subdirectory(${SPRIG_GTEST_SOURCE} ${PROJECT_BINARY_DIR}/googletest EXCLUDE_FROM_ALL)
    # GoogleTest's own CMakeLists names its targets GTest::gtest and GTest::gtest_main.
  endif()
else()
  find_package(xsimd REQUIRED)
  # xsimd is header-only; Debian's exported target also drags in xtl, which we do not use, so
  # we take only its include directory.
  get_target_property(SPRIG_XSIMD_INCLUDE xsimd INTERFACE_INCLUDE_DIRECTORIES)
  add_library(sprig_xsimd INTERFACE)
  target_include_directories(sprig_xsimd SYSTEM INTERFACE ${SPRIG_XSIMD_INCLUDE})
  # Only FlatBuffers' headers: the generated reader, builder and verifier need no library.
  find_package(FlatBuffers REQUIRED)
  get_target_property(SPRIG_FLATBUFFERS_INCLUDE flatbuffers::flatbuffers
                      INTERFACE_INCLUDE_DIRECTORIES)
  add_library(sprig_flatbuffers INTERFACE)
  if(SPRIG_FLATBUFFERS_INCLUDE)
    target_include_directories(sprig_flatbuffers SYSTEM INTERFACE ${SPRIG_FLATBUFFERS_INCLUDE})
  endif()
  find_package(nlohmann_json REQUIRED)
  find_package(CLI11 REQUIRED)
  if(SPRIG_BUILD_TESTS OR SPRIG_THREAD_SANITIZER)
    find_package(GTest REQUIRED)
  endif()
endif()

# libsentencepiece (Debian's libsentencepiece-dev), optional: the converter reads SentencePiece
# .model files with it, and the tokenizer's agreement test and benchmark compare against it.
# Never in a cross build, where pkg-config would find the host's library. Without it the
# runtime still encodes and decodes packed tokenizers (runtime/src/tokenizer has no dependency).
if(NOT CMAKE_CROSSCOMPILING)
  find_package(PkgConfig QUIET)
  if(PKG_CONFIG_FOUND)
    pkg_check_modules(SPRIG_SENTENCEPIECE QUIET IMPORTED_TARGET sentencepiece)
  endif()
endif()
if(SPRIG_SENTENCEPIECE_FOUND)
  message(STATUS "sprig: SentencePiece ${SPRIG_SENTENCEPIECE_VERSION} found (reading .model files)")
else()
  message(STATUS "sprig: SentencePiece not found; the converter will not read .model files")
endif()
