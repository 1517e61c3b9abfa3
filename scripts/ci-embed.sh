#!/usr/bin/env bash
# Installs sprig from a build directory into a temporary prefix, builds the embedding examples
# (samples/embed) out of tree against that installation -- the C++ one through
# find_package(sprig CONFIG), the C one through pkg-config too -- packs the sample language
# model with the installed `sprig`, and runs both examples on a few notes.
set -euo pipefail
BUILD="${1:-build}"
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
WORK="$(mktemp -d)"
trap 'rm -rf "$WORK"' EXIT
PREFIX="$WORK/prefix"

echo "== install into a temporary prefix"
cmake --install "$BUILD" --prefix "$PREFIX" > "$WORK/install.log"
LIBDIR="$(dirname "$(find "$PREFIX" -name 'libsprig.so' -print -quit)")"
# The library's SONAME (libsprig.so.MAJOR, or libsprig.so.0.MINOR before 1.0), as the loader
# looks it up.
SONAME="$(objdump -p "$LIBDIR/libsprig.so" | awk '/SONAME/ {print $2}')"
test -n "$SONAME"
test -f "$PREFIX/include/sprig/sprig.h"
test -x "$PREFIX/bin/sprig"

echo "== build samples/embed against the installed package (CMake)"
cmake -S "$ROOT/samples/embed" -B "$WORK/embed" -DCMAKE_PREFIX_PATH="$PREFIX" \
  -DCMAKE_BUILD_TYPE=Release > "$WORK/embed-configure.log"
cmake --build "$WORK/embed" -j "$(nproc)" > "$WORK/embed-build.log"

echo "== build the C example with pkg-config"
export PKG_CONFIG_PATH="$LIBDIR/pkgconfig"
# shellcheck disable=SC2046  # pkg-config prints several flags
cc -std=c11 -Wall -Wextra -o "$WORK/note_suggest_pc" "$ROOT/samples/embed/note_suggest.c" \
  $(pkg-config --cflags --libs sprig)

echo "== run both on the sample model"
"$PREFIX/bin/sprig" pack "$ROOT/samples/lm/tree/config.json" "$ROOT/samples/lm/tree/weights.npz" \
  -o "$WORK/notes.sprig" > /dev/null
export LD_LIBRARY_PATH="$LIBDIR"
notes=$'Day 12 at Quill Hill: fog until noon. Marit\nWe picked 14 crates of\nSaw wasps in the'
for program in "$WORK/embed/note_suggest" "$WORK/embed/note_suggest_c" "$WORK/note_suggest_pc"; do
  out="$(printf '%s\n' "$notes" | "$program" "$WORK/notes.sprig")"
  head -4 <<< "$out"
  # Every note gets a suggestion line and a latency/memory line.
  lines="$(grep -c ' ms, resident ' <<< "$out" || true)"
  if [ "$lines" -ne 3 ]; then
    echo "error: $program printed $lines latency lines for 3 notes" >&2
    exit 1
  fi
  # The programs link the installed shared library, not a copy. ldd's output goes to a file
  # first: `ldd | grep -q` fails at random under pipefail, because grep exits at the first
  # match and ldd reports the loader's SIGPIPE on the remaining lines as an error.
  ldd "$program" > "$WORK/ldd.txt"
  if ! grep -q "$LIBDIR/$SONAME" "$WORK/ldd.txt"; then
    echo "error: $program does not load $LIBDIR/$SONAME:" >&2
    cat "$WORK/ldd.txt" >&2
    exit 1
  fi
done
echo "embedding examples: 3 passed, 0 failed"
