#!/usr/bin/env bash
# Builds the plugin folder QGIS loads (QGIS_PLUGINPATH=build/plugins) as symlinks into the
# source tree: build/plugins/channel_habitat/{__init__.py, core, ..., metadata.txt, resources}.
set -euo pipefail
stage="$1"
root="$(cd "$(dirname "$0")/.." && pwd)"
rm -rf "$stage"
mkdir -p "$stage"
for entry in "$root"/plugin/*; do
  name="$(basename "$entry")"
  case "$name" in __pycache__) continue ;; esac
  ln -s "$entry" "$stage/$name"
done
ln -s "$root/metadata.txt" "$stage/metadata.txt"
ln -s "$root/LICENSE" "$stage/LICENSE"
ln -s "$root/resources" "$stage/resources"
