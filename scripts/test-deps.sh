#!/usr/bin/env bash
# Installs the Debian packages the tests use, when they are missing (--no-install-recommends):
# sox (WAV cross-checks), prometheus (a real scraper and promtool), chromium and a font (pages in
# a real browser), the ALSA runtime (the PortAudio device tests), redis-server (queued sweeps),
# gcc and libfftw3-dev (generated C and the FFTW reference). Needs root or password-less sudo;
# otherwise it says what to install.
set -euo pipefail
need=()
command -v sox >/dev/null || need+=(sox)
command -v prometheus >/dev/null || need+=(prometheus)
command -v promtool >/dev/null || need+=(prometheus)
command -v chromium >/dev/null || need+=(chromium)
[ -d /usr/share/fonts/truetype/dejavu ] || need+=(fonts-dejavu-core)
[ -e /usr/share/alsa/alsa.conf ] || need+=(libasound2)
command -v redis-server >/dev/null || need+=(redis-server)
command -v gcc >/dev/null || need+=(gcc)
[ -e /usr/include/fftw3.h ] || need+=(libfftw3-dev)
if [ ${#need[@]} -eq 0 ]; then exit 0; fi
mapfile -t need < <(printf '%s\n' "${need[@]}" | sort -u)
sudo=""
if [ "$(id -u)" -ne 0 ]; then
  if command -v sudo >/dev/null && sudo -n true 2>/dev/null; then sudo="sudo -n"; else
    echo "tests need these Debian packages: ${need[*]} (run: apt-get install --no-install-recommends ${need[*]})" >&2
    exit 1
  fi
fi
echo "installing Debian packages for the tests: ${need[*]}" >&2
export DEBIAN_FRONTEND=noninteractive
$sudo apt-get update -qq >&2
$sudo apt-get install -y -qq --no-install-recommends "${need[@]}" >&2
