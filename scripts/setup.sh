#!/usr/bin/env bash
# Installs what brume needs to build and test (Debian 12), only what is missing.
# Runs apt-get as root, or through sudo when not root.
set -euo pipefail
# --with-fuzz: also clang and its libFuzzer runtime, for the fuzz harnesses (scripts/test.sh).
pkgs=(gcc meson ninja-build pkg-config libcjson-dev libzstd-dev libcmocka-dev libgsl-dev zstd netpbm python3)
if [ "${1:-}" = "--with-fuzz" ]; then pkgs+=(clang libclang-rt-14-dev); fi
missing=()
for p in "${pkgs[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q 'install ok installed' || missing+=("$p")
done
if [ ${#missing[@]} -gt 0 ]; then
  echo "setup: installing ${missing[*]}" >&2
  sudo=""
  [ "$(id -u)" -eq 0 ] || sudo="sudo"
  export DEBIAN_FRONTEND=noninteractive
  $sudo apt-get update -qq
  $sudo apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
fi
