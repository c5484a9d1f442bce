#!/bin/sh
# Installs the Debian packages named as arguments that are missing, using
# dpkg-query (not every library ships a pkg-config file). As root it runs one
# apt-get update and apt-get install; otherwise it prints the exact command.
missing=""
for p in "$@"; do
    st=$(dpkg-query -W -f='${Status}' "$p" 2>/dev/null)
    case "$st" in *"install ok installed"*) ;; *) missing="$missing $p" ;; esac
done
[ -z "$missing" ] && exit 0
if [ "$(id -u)" != 0 ]; then
    echo "precess needs these Debian packages:$missing" >&2
    echo "run as root:  apt-get update && apt-get install -y$missing" >&2
    exit 1
fi
echo "installing:$missing"
export DEBIAN_FRONTEND=noninteractive
apt-get update -qq || exit 1
apt-get install -y -qq --no-install-recommends $missing || exit 1
