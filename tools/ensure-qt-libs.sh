#!/usr/bin/env bash
# Install the system libraries Qt needs (offscreen and on an X11 desktop)
# when they are missing and we may install them (root with apt-get).
# Does nothing where they are present; never fails the build on its own.
set -u
needed="libegl1 libgl1 libfontconfig1 libxkbcommon0 libglib2.0-0 libdbus-1-3 fonts-dejavu-core
libxkbcommon-x11-0 libxcb-cursor0 libxcb-icccm4 libxcb-keysyms1 libxcb-shape0 libxcb-render-util0
libxcb-image0 libxcb-randr0 libxcb-xinerama0"
command -v dpkg-query >/dev/null || exit 0
missing=""
for pkg in $needed; do
  dpkg-query -W -f='${Status}' "$pkg" 2>/dev/null | grep -q "install ok installed" || missing="$missing $pkg"
done
[ -z "$missing" ] && exit 0
if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null; then
  echo "Installing system libraries for Qt:$missing"
  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq $missing >/dev/null \
    || echo "warning: could not install$missing; the window may not start" >&2
else
  echo "note: Qt may need these system packages:$missing (install them with your package manager)" >&2
fi
exit 0
