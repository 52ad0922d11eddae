#!/bin/sh
# Install Debian packages for binaries the project calls, when the binary is missing.
# Arguments: BINARY:PACKAGE pairs. Where apt-get cannot be used, print one line per
# missing tool saying what to install, and carry on (the tests that need it will say so).
set -u
missing=""
for pair in "$@"; do
    bin=${pair%%:*}
    pkg=${pair#*:}
    command -v "$bin" >/dev/null 2>&1 || missing="$missing $pkg"
done
[ -z "$missing" ] && exit 0

if command -v apt-get >/dev/null 2>&1; then
    if [ "$(id -u)" = 0 ]; then
        SUDO=""
    elif command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then
        SUDO="sudo -n"
    else
        SUDO="none"
    fi
    if [ "$SUDO" != "none" ]; then
        echo "installing Debian packages:$missing"
        $SUDO apt-get update -qq >/dev/null &&
            DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq $missing >/dev/null &&
            exit 0
        echo "apt-get could not install:$missing" >&2
    fi
fi
for pkg in $missing; do
    echo "please install the Debian package '$pkg' (apt-get install $pkg); some checks need it" >&2
done
exit 0
