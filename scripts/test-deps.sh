#!/usr/bin/env bash
# Installs the Debian packages the tests use, when they are missing: sox (WAV cross-checks),
# prometheus (a real scraper), chromium (the report in a real browser), and the ALSA runtime
# the PortAudio device test uses. Needs root or sudo; otherwise it says what to install.
set -euo pipefail
need=()
command -v sox >/dev/null || need+=(sox)
command -v prometheus >/dev/null || need+=(prometheus)
command -v promtool >/dev/null || need+=(prometheus)
command -v chromium >/dev/null || need+=(chromium)
[ -e /usr/share/alsa/alsa.conf ] || need+=(libasound2)
if [ ${#need[@]} -eq 0 ]; then exit 0; fi
mapfile -t need < <(printf '%s\n' "${need[@]}" | sort -u)
sudo=""
if [ "$(id -u)" -ne 0 ]; then
  if command -v sudo >/dev/null && sudo -n true 2>/dev/null; then sudo="sudo -n"; else
    echo "tests need these Debian packages: ${need[*]} (run: apt-get install ${need[*]})" >&2
    exit 1
  fi
fi
echo "installing Debian packages for the tests: ${need[*]}" >&2
export DEBIAN_FRONTEND=noninteractive
$sudo apt-get update -qq >&2
$sudo apt-get install -y -qq "${need[@]}" >&2
