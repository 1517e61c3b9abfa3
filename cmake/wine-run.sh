#!/usr/bin/env bash
# Runs a Windows program under Wine for CTest and for the test discovery at build time (the
# cross build's CMAKE_CROSSCOMPILING_EMULATOR). Wine's own diagnostics are off unless WINEDEBUG
# asks for them. The program's output passes through with the carriage returns of the C
# runtime's text mode removed, so that CTest and GoogleTest's discovery read plain lines; the
# exit code is the program's.
set -uo pipefail
export WINEDEBUG="${WINEDEBUG:--all}"
wine "$@" | tr -d '\r'
exit "${PIPESTATUS[0]}"
