#!/usr/bin/env bash
# The Windows counterpart of ci-embed.sh: installs a cross-built sprig into a temporary prefix,
# builds the embedding examples (samples/embed) against that installation with MinGW-w64 --
# the C++ and C ones through find_package(sprig CONFIG), the C one through pkg-config too --
# packs the sample language model with the installed sprig.exe and runs all three under Wine.
# Usage: scripts/ci-embed-windows.sh BUILD_WIN [WORK]; Wine must be installed
# (scripts/install-windows-deps.sh).
set -euo pipefail
BUILD="$1"
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
WORK="${2:-$(mktemp -d)}"
mkdir -p "$WORK"
PREFIX="$WORK/prefix"
WINE_RUN="$ROOT/cmake/wine-run.sh"
export WINEDEBUG=-all WINEDLLOVERRIDES="mscoree=;mshtml="

echo "== install into a temporary prefix"
cmake --install "$BUILD" --prefix "$PREFIX" > "$WORK/install.log" 2>&1 ||
  (cat "$WORK/install.log" && exit 1)
for f in bin/sprig.dll bin/sprig.exe lib/libsprig.dll.a lib/libsprig.a include/sprig/sprig.h \
  lib/pkgconfig/sprig.pc lib/cmake/sprig/sprigConfig.cmake; do
  test -f "$PREFIX/$f" || { echo "error: the package has no $f" >&2; exit 1; }
done

echo "== build samples/embed against the installed package (CMake, MinGW-w64)"
# The toolchain file confines package searches to the target's root (/usr/x86_64-w64-mingw32,
# where zlib is), so the package is named by its folder.
cmake -S "$ROOT/samples/embed" -B "$WORK/embed" -Dsprig_DIR="$PREFIX/lib/cmake/sprig" \
  -DCMAKE_TOOLCHAIN_FILE="$ROOT/cmake/toolchain-x86_64-w64-mingw32.cmake" \
  -DCMAKE_BUILD_TYPE=Release > "$WORK/embed-configure.log" 2>&1 ||
  (cat "$WORK/embed-configure.log" && exit 1)
cmake --build "$WORK/embed" -j "$(nproc)" > "$WORK/embed-build.log" 2>&1 ||
  (cat "$WORK/embed-build.log" && exit 1)

echo "== build the C example with pkg-config"
# The host's pkg-config reads the package's sprig.pc; only the package's folder is searched.
# The example's clock_gettime comes from winpthreads, linked in, as the CMake build does
# through the toolchain file, so that the program needs no MinGW DLL beside sprig.dll.
# shellcheck disable=SC2046  # pkg-config prints several flags
x86_64-w64-mingw32-gcc-posix -std=c11 -Wall -Wextra -o "$WORK/note_suggest_pc.exe" \
  "$ROOT/samples/embed/note_suggest.c" \
  $(PKG_CONFIG_LIBDIR="$PREFIX/lib/pkgconfig" pkg-config --cflags --libs sprig) \
  -Wl,-Bstatic -lwinpthread -Wl,-Bdynamic

echo "== run all three on the sample model under Wine"
"$WINE_RUN" "$PREFIX/bin/sprig.exe" pack "$ROOT/samples/lm/tree/config.json" \
  "$ROOT/samples/lm/tree/weights.npz" -o "$WORK/notes.sprig" > /dev/null
# Windows finds a program's DLLs in the program's folder and on PATH, which Wine takes from
# WINEPATH: the installed sprig.dll, and nothing else of sprig's.
export WINEPATH="$PREFIX/bin"
notes=$'Day 12 at Quill Hill: fog until noon. Marit\nWe picked 14 crates of\nSaw wasps in the'
for program in "$WORK/embed/note_suggest.exe" "$WORK/embed/note_suggest_c.exe" \
  "$WORK/note_suggest_pc.exe"; do
  out="$(printf '%s\n' "$notes" | "$WINE_RUN" "$program" "$WORK/notes.sprig")"
  head -4 <<< "$out"
  # Every note gets a suggestion line and a latency/memory line.
  lines="$(grep -c ' ms, resident ' <<< "$out" || true)"
  if [ "$lines" -ne 3 ]; then
    echo "error: $program printed $lines latency lines for 3 notes" >&2
    exit 1
  fi
  # The programs import the installed DLL, not a copy of the library linked in.
  x86_64-w64-mingw32-objdump -p "$program" > "$WORK/imports.txt"
  if ! grep -q "DLL Name: sprig.dll" "$WORK/imports.txt"; then
    echo "error: $program does not import sprig.dll" >&2
    exit 1
  fi
done
echo "embedding examples under Wine: 3 passed, 0 failed"
