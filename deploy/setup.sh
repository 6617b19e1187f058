#!/usr/bin/env bash
# Installs the Debian packages forewarden needs that are missing on this machine.
#   deploy/setup.sh          build packages only
#   deploy/setup.sh --test   also what the test suite needs (reference libraries, peers)
# Uses sudo when not run as root. Installs only what dpkg does not already have.
set -euo pipefail

build_pkgs=(cmake g++ ninja-build ccache pkg-config libboost-dev libboost-system-dev
            libyaml-cpp-dev libsqlite3-dev prometheus-cpp-dev catch2 nlohmann-json3-dev
            libssl-dev libjs-dygraphs librdkafka-dev curl python3)
test_pkgs=(python3 python3-statsmodels python3-pandas python3-numpy r-base-core r-cran-forecast
           prometheus prometheus-alertmanager systemd clang libclang-rt-14-dev
           clang-format clang-tidy openssl chromium chromium-driver python3-selenium)

want=("${build_pkgs[@]}")
if [[ "${1:-}" == "--test" ]]; then want+=("${test_pkgs[@]}"); fi

missing=()
for p in "${want[@]}"; do
  if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
    missing+=("$p")
  fi
done
if ((${#missing[@]} == 0)); then
  echo "setup: all ${#want[@]} packages present"
  exit 0
fi

as_root=()
if [[ $(id -u) -ne 0 ]]; then as_root=(sudo); fi
echo "setup: installing ${missing[*]}"
"${as_root[@]}" apt-get -o DPkg::Lock::Timeout=600 update -q
"${as_root[@]}" env DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends \
  -o DPkg::Lock::Timeout=600 "${missing[@]}"
