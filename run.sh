#!/usr/bin/env bash
# spinrail set-up and entry: everything a fresh clone needs, in two commands.
#   ./run.sh demo [--out DIR]   run the main job on the built-in demo
#   ./run.sh test [PYTEST ARGS] run the whole test suite
# Both create .venv and install the project with its test extra on first use (and again when
# pyproject.toml changes). `test` also installs the Debian packages the outside checks use
# (ngspice; valgrind for the benchmarks; gcc-arm-none-eabi, libnewlib-arm-none-eabi and
# qemu-system-arm for the emulated 32-bit boards) when they are missing and this user may install.
set -euo pipefail
cd "$(dirname "$0")"
VENV=.venv

setup_python() {
  if [ ! -x "$VENV/bin/python" ]; then
    echo "run.sh: creating $VENV" >&2
    python3 -m venv "$VENV"
  fi
  local stamp="$VENV/.spinrail-installed"
  if [ ! -f "$stamp" ] || [ pyproject.toml -nt "$stamp" ]; then
    echo "run.sh: installing spinrail and its test extra into $VENV" >&2
    local log="$VENV/install.log"
    if ! { "$VENV/bin/python" -m pip install --upgrade pip &&
           "$VENV/bin/python" -m pip install -e ".[test]"; } >"$log" 2>&1; then
      tail -n 30 "$log" >&2
      echo "run.sh: installing failed; the whole log is in $log" >&2
      exit 1
    fi
    touch "$stamp"
  fi
}

setup_system() {
  local missing=()
  command -v ngspice >/dev/null 2>&1 || missing+=(ngspice)
  command -v valgrind >/dev/null 2>&1 || missing+=(valgrind)
  # the emulated 32-bit boards (tests/mcu, spinrail board emulate)
  command -v arm-none-eabi-gcc >/dev/null 2>&1 || missing+=(gcc-arm-none-eabi)
  [ -e /usr/lib/arm-none-eabi/include/stdio.h ] || [ -e /usr/include/newlib/stdio.h ] ||
    missing+=(libnewlib-arm-none-eabi)
  command -v qemu-system-arm >/dev/null 2>&1 || missing+=(qemu-system-arm)
  # the browser that renders report.html in the report tests
  command -v chromium >/dev/null 2>&1 || missing+=(chromium)
  [ ${#missing[@]} -eq 0 ] && return 0
  local sudo=""
  [ "$(id -u)" = 0 ] || sudo="sudo -n"
  if command -v apt-get >/dev/null 2>&1 && { [ -z "$sudo" ] || sudo -n true 2>/dev/null; }; then
    echo "run.sh: installing ${missing[*]} (Debian packages)" >&2
    { $sudo apt-get update -qq && DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq --no-install-recommends "${missing[@]}"; } >&2 ||
      echo "run.sh: could not install ${missing[*]}; the tests that need them will be skipped" >&2
  else
    echo "run.sh: ${missing[*]} missing and cannot be installed here (apt-get install ${missing[*]});" \
         "the tests that need them will be skipped" >&2
  fi
}

case "${1:-}" in
  demo)
    shift; setup_python
    exec "$VENV/bin/spinrail" demo "$@" ;;
  test)
    shift; setup_python; setup_system
    exec "$VENV/bin/python" -m pytest "$@" ;;
  *)
    echo "usage: ./run.sh demo [--out DIR] | ./run.sh test [pytest args]" >&2
    exit 2 ;;
esac
