#!/usr/bin/env bash
# Installs the Debian 12 packages Channel Habitat needs, only when one is missing (idempotent:
# with everything present this takes a fraction of a second).
set -euo pipefail
PACKAGES=(
  python3-qgis qgis-providers qgis      # QGIS 3.22 bindings, data providers, qgis_process.bin
  python3-venv python3-pip              # the development venv
  gdal-bin python3-gdal                 # GDAL command-line tools and bindings
  python3-numpy python3-scipy python3-matplotlib python3-netcdf4 python3-pyproj
  poppler-utils                         # pdfinfo/pdftotext, used by the map-panel tests
)
missing=()
for p in "${PACKAGES[@]}"; do
  if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
    missing+=("$p")
  fi
done
if [ ${#missing[@]} -eq 0 ]; then
  exit 0
fi
echo "Installing Debian packages: ${missing[*]}"
SUDO=""
if [ "$(id -u)" -ne 0 ]; then
  if command -v sudo >/dev/null; then SUDO="sudo"; else
    echo "error: need root or sudo to install: ${missing[*]}" >&2; exit 1; fi
fi
$SUDO env DEBIAN_FRONTEND=noninteractive apt-get update -qq
$SUDO env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${missing[@]}"
