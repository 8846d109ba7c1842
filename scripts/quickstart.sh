#!/usr/bin/env bash
# gloam quick start: install what is missing (Debian 12), build, then either
#   demo  -- run the demo reduction on demo-frames/ into demo-run/
#   test  -- run the whole test suite (warnings as errors, reference tests,
#            format check, then the C unit tests again under AddressSanitizer
#            and UndefinedBehaviorSanitizer); the last line is "N passed, N failed"
set -euo pipefail
cd "$(dirname "$0")/.."

what=${1:-demo}
case "$what" in demo|test) ;; *) echo "usage: $0 demo|test" >&2; exit 1 ;; esac

# ---- 1. Debian packages -----------------------------------------------------
packages=(build-essential meson ninja-build pkg-config
          libcfitsio-dev wcslib-dev libfftw3-dev liblapacke-dev libopenblas-dev
          liberfa-dev libgsl-dev libcairo2-dev libcjson-dev zlib1g-dev libinih-dev
          libopenmpi-dev openmpi-bin)
if [ "$what" = test ]; then
  packages+=(fitsverify clang-format python3-pytest python3-numpy python3-scipy
             python3-astropy python3-photutils python3-skimage python3-astroplan
             chromium poppler-utils)
fi
missing=()
for p in "${packages[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ ${#missing[@]} -gt 0 ]; then
  echo "installing: ${missing[*]}"
  sudo=""
  [ "$(id -u)" -ne 0 ] && sudo="sudo"
  $sudo apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
fi

# ---- 2. build ---------------------------------------------------------------
setup() { # meson setup DIR [options], quiet unless it fails
  local dir=$1 log
  log=$(mktemp)
  shift
  meson setup "$dir" "$@" >"$log" 2>&1 || { cat "$log" >&2; rm -f "$log"; exit 1; }
  rm -f "$log"
}
if [ "$what" = demo ]; then
  [ -f build/build.ninja ] || setup build
  ninja -C build >/dev/null
  exec bash scripts/demo.sh build/src/cli/gloam demo-run
fi

# ---- 3. tests ---------------------------------------------------------------
passed=0
failed=0
count() { # adds the Ok/Fail counts of a meson test log to the totals
  local ok fail
  ok=$(sed -n 's/^Ok: *\([0-9]*\).*/\1/p' "$1" | tail -n 1)
  fail=$(sed -n 's/^Fail: *\([0-9]*\).*/\1/p' "$1" | tail -n 1)
  to=$(sed -n 's/^Timeout: *\([0-9]*\).*/\1/p' "$1" | tail -n 1)
  passed=$((passed + ${ok:-0}))
  failed=$((failed + ${fail:-0} + ${to:-0}))
  if [ -z "$ok" ]; then failed=$((failed + 1)); fi
}

rm -rf build-test build-sanitize
setup build-test -Dwerror=true
ninja -C build-test
meson test -C build-test --print-errorlogs --num-processes 2 2>&1 | tee build-test/summary.txt || true
count build-test/summary.txt

setup build-sanitize -Db_sanitize=address,undefined -Dbuildtype=debugoptimized \
  -Db_lundef=false -Dwerror=true
ninja -C build-sanitize
ASAN_OPTIONS=detect_leaks=1:abort_on_error=1 UBSAN_OPTIONS=halt_on_error=1:print_stacktrace=1 \
  meson test -C build-sanitize --suite unit --print-errorlogs --num-processes 2 2>&1 \
  | tee build-sanitize/summary.txt || true
count build-sanitize/summary.txt

echo "$passed passed, $failed failed"
[ "$failed" -eq 0 ]
