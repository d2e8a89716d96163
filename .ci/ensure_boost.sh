#!/usr/bin/env bash
# dionysus builds from source and needs Boost headers 1.79 or newer.
# Skip when dionysus already imports in .venv; otherwise find the headers,
# install Debian's libboost1.81-dev when we are root with apt, or say exactly
# what to install.
set -u
need=107900
if [ -x .venv/bin/python ] && .venv/bin/python -c "import dionysus" 2>/dev/null; then
    exit 0
fi
boost_version() {
    for dir in ${BOOST_ROOT:+$BOOST_ROOT/include} $(echo "${CPATH:-}" | tr ":" " ") /usr/local/include /usr/include /opt/homebrew/include; do
        f="$dir/boost/version.hpp"
        if [ -f "$f" ]; then
            sed -n 's/^#define BOOST_VERSION \([0-9]*\).*/\1/p' "$f" | head -n 1
            return
        fi
    done
    echo 0
}
have=$(boost_version)
if [ "${have:-0}" -ge "$need" ]; then
    exit 0
fi
if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null 2>&1; then
    echo "metertop set-up: Boost headers >= 1.79 not found (found ${have}); installing libboost1.81-dev with apt-get" >&2
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq >/dev/null && apt-get install -y -qq libboost1.81-dev >/dev/null || {
        echo "metertop set-up: apt-get install libboost1.81-dev failed" >&2; exit 1; }
    have=$(boost_version)
    [ "${have:-0}" -ge "$need" ] && exit 0
fi
cat >&2 <<MSG
metertop set-up: dionysus needs the Boost C++ headers, version 1.79 or newer (found: ${have}).
Install them, then run make again:
  Debian 12 / Ubuntu 23.04+:  sudo apt-get install libboost1.81-dev   (not libboost-dev, which is 1.74)
  Fedora:                     sudo dnf install boost-devel
  macOS (Homebrew):           brew install boost
  conda:                      conda install -c conda-forge boost-cpp
  or unpack Boost >= 1.79 anywhere and set BOOST_ROOT to its folder (headers in \$BOOST_ROOT/include).
MSG
exit 1
