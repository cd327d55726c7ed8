#!/usr/bin/env bash
# Installs what lineshot needs to build, when it is missing: Debian's
# libopencv-dev (OpenCV 4.6, the version gocv v0.32 builds against),
# libjpeg-dev, libheif-dev and pkg-config, using sudo when not root; then
# the Go modules.
# Sourced by demo.sh and test.sh; safe to run again.
set -euo pipefail

need_apt=()
command -v pkg-config >/dev/null 2>&1 || need_apt+=(pkg-config)
if ! pkg-config --exists opencv4 2>/dev/null; then
  need_apt+=(libopencv-dev)
fi
# libjpeg's headers, for the row decoder (imaging/jpegrows.c); libopencv-dev
# brings them too, through libtiff-dev.
pkg-config --exists libjpeg 2>/dev/null || need_apt+=(libjpeg-dev)
# libheif, for HEIF/HEIC photos (imaging/heif.c).
pkg-config --exists libheif 2>/dev/null || need_apt+=(libheif-dev)
for pkg in "$@"; do
  dpkg -s "$pkg" >/dev/null 2>&1 || need_apt+=("$pkg")
done

if [ ${#need_apt[@]} -gt 0 ]; then
  echo "setup: installing ${need_apt[*]} (Debian packages)" >&2
  sudo=""
  if [ "$(id -u)" -ne 0 ]; then
    command -v sudo >/dev/null 2>&1 || { echo "setup: need root or sudo to install ${need_apt[*]}" >&2; exit 1; }
    sudo="sudo"
  fi
  $sudo apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $sudo apt-get install -y -qq --no-install-recommends "${need_apt[@]}" >/dev/null
fi

command -v go >/dev/null 2>&1 || {
  for g in /usr/local/go/bin/go /usr/lib/go/bin/go; do [ -x "$g" ] && export PATH="$(dirname "$g"):$PATH" && break; done
}
command -v go >/dev/null 2>&1 || { echo "setup: Go 1.26 or newer is needed (https://go.dev/doc/install)" >&2; exit 1; }
go mod download
