#!/bin/sh
# Remove the Samplewright that install.sh installed for this user: exactly the files listed in
# $XDG_DATA_HOME/samplewright/app/installed-files, the bundle, and the folders install.sh created
# when they are empty. Your preset library, settings and the converted-model cache stay.
set -eu
data="${XDG_DATA_HOME:-$HOME/.local/share}"
app="$data/samplewright/app"
manifest="$app/installed-files"
quiet=${1:-}

[ -f "$manifest" ] || { echo "uninstall.sh: Samplewright is not installed here ($manifest is missing)" >&2; exit 2; }
# Read the list before removing anything: the list is one of the files it names.
list=$(cat "$manifest")
rm -rf "$app/bundle"
echo "$list" | while IFS= read -r line; do
  case "$line" in
    "file "*) path=${line#file }
      if [ -L "$path" ] || [ -f "$path" ]; then rm -f "$path"; fi ;;
  esac
done
# Folders deepest first; rmdir leaves any folder that still holds something (e.g. the library).
echo "$list" | sed -n 's/^dir //p' | awk '{ print length($0) "\t" $0 }' | sort -rn | cut -f2- | while IFS= read -r dir; do
  rmdir "$dir" 2>/dev/null || true
done
rmdir "$app" 2>/dev/null || true
[ "$quiet" = "--quiet" ] || echo "Samplewright removed; your preset library and settings were kept."
