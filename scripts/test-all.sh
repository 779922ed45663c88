#!/usr/bin/env bash
# Installs everything the test suite needs on a fresh machine, then runs it.
# The README's test command and .ci/run both call this script.
set -euo pipefail
cd "$(dirname "$0")/.."

PNPM="npx -y pnpm@12.4.2"

# Debian packages used by tests (compilers for export parity, a browser for reports,
# a Redis server for the distributed sweep). Installed only when missing and when root.
need=()
command -v gcc >/dev/null 2>&1 || need+=(gcc)
command -v gfortran >/dev/null 2>&1 || need+=(gfortran)
# The report page test drives Debian's chromium at this path (never a downloaded browser).
[ -x /usr/bin/chromium ] || need+=(chromium)
# The distributed sweep test starts its own redis-server on 127.0.0.1 (a free port, no
# persistence) and stops it; the Debian service is not used.
command -v redis-server >/dev/null 2>&1 || need+=(redis-server)
if [ "${#need[@]}" -gt 0 ]; then
  if [ "$(id -u)" = "0" ]; then
    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${need[@]}"
  else
    echo "test-all: missing ${need[*]}; install them (Debian: apt-get install ${need[*]})" >&2
    case " ${need[*]} " in
      *" chromium "*) echo "test-all: !!! WITHOUT /usr/bin/chromium THE HEADLESS-BROWSER REPORT TEST IS SKIPPED (it fails when CI is set) !!!" >&2 ;;
    esac
    case " ${need[*]} " in
      *" redis-server "*) echo "test-all: !!! WITHOUT redis-server THE DISTRIBUTED SWEEP TESTS ARE SKIPPED (they fail when CI is set) !!!" >&2 ;;
    esac
  fi
fi

export ONNXRUNTIME_NODE_INSTALL=skip
$PNPM install --frozen-lockfile
$PNPM test
