#!/usr/bin/env bash
# Offline coastlines for maps: Debian's python-cartopy-data (coarse GSHHS shapefiles).
# Installed where the system allows (root with apt-get); elsewhere maps draw without coastlines.
set -u
if [ -f /usr/share/cartopy/data/shapefiles/gshhs/c/GSHHS_c_L1.shp ]; then
  exit 0
fi
if command -v apt-get >/dev/null 2>&1 && [ "$(id -u)" = "0" ]; then
  (apt-get install -y -q python-cartopy-data >/dev/null 2>&1 \
    || { apt-get update -q >/dev/null 2>&1 && apt-get install -y -q python-cartopy-data >/dev/null 2>&1; }) \
    && echo "installed offline coastlines (python-cartopy-data)" \
    || echo "note: could not install python-cartopy-data; maps will have no coastlines"
else
  echo "note: offline coastlines not installed (needs root and apt-get: python-cartopy-data)"
fi
exit 0
