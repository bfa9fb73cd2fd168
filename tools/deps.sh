#!/bin/sh
# nightjar dependency helper: makes sure the Debian packages a make target needs
# are installed. As root it runs apt-get; otherwise it prints the exact command
# and exits non-zero so the build stops with a clear instruction.
#   usage: tools/deps.sh build|test|fuzz|all
set -u
BUILD_PKGS="gcc make libopenblas-dev libstb-dev libcjson-dev"
FUZZ_PKGS="clang-14 libclang-rt-14-dev libomp-14-dev"
TEST_PKGS="libopenmpi-dev openmpi-bin python3 python3-torch python3-numpy python3-scipy python3-skimage python3-opencv opencv-doc python3-onnx gcc-aarch64-linux-gnu libc6-dev-arm64-cross qemu-user chromium tidy"

case "${1:-build}" in
  build) want="$BUILD_PKGS" ;;
  test) want="$BUILD_PKGS $TEST_PKGS" ;;
  fuzz) want="$BUILD_PKGS $FUZZ_PKGS" ;;
  all) want="$BUILD_PKGS $TEST_PKGS $FUZZ_PKGS" ;;
  *) echo "deps.sh: unknown target '$1' (expected build, test, fuzz or all)" >&2; exit 2 ;;
esac

if ! command -v dpkg-query >/dev/null 2>&1; then
  echo "deps.sh: dpkg-query not found; install these packages by hand: $want" >&2
  exit 0
fi

missing=""
for p in $want; do
  st=$(dpkg-query -W -f='${Status}' "$p" 2>/dev/null)
  case "$st" in *"install ok installed"*) ;; *) missing="$missing $p" ;; esac
done
[ -z "$missing" ] && exit 0

if [ "$(id -u)" = "0" ]; then
  echo "deps.sh: installing missing Debian packages:$missing"
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq || { echo "deps.sh: apt-get update failed" >&2; exit 1; }
  apt-get install -y -qq --no-install-recommends $missing || {
    echo "deps.sh: apt-get install failed for:$missing" >&2; exit 1; }
  exit 0
fi
echo "deps.sh: missing Debian packages:$missing" >&2
echo "deps.sh: run:  sudo apt-get install -y$missing" >&2
exit 1
