#!/usr/bin/env bash
# Installs the Debian packages Kivy needs to open a window, Xvfb (tests, snapshots without a display) and
# poppler-utils (pdftoppm: the report tests render the PDFs to check what a reader sees), and for the
# tests and benchmarks PostgreSQL (a fixture starts a throw-away server for the office archive).
# As root it installs what is missing; otherwise it prints the one line to run.
set -eu
# Xvfb for both: tests need it, and `streamtab app --snapshot` uses it where there is no display.
# openssl: the TLS test makes its certificate with it (and fails under CI without one).
want=(libgl1-mesa-dri libegl1 libgl1 libmtdev1 xvfb xauth poppler-utils openssl)
if [ "${1:-}" = test ]; then want+=(postgresql); fi
command -v dpkg-query >/dev/null 2>&1 || exit 0
missing=()
for p in "${want[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q 'install ok installed' || missing+=("$p")
done
[ ${#missing[@]} -eq 0 ] && exit 0
if [ "$(id -u)" -eq 0 ]; then
  echo "streamtab: installing system packages: ${missing[*]}"
  export DEBIAN_FRONTEND=noninteractive
  apt-get update -qq
  apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
else
  echo "streamtab: missing system packages; run: sudo apt-get install -y ${missing[*]}"
  exit 1
fi
