#!/bin/sh
# Install Samplewright for the current user; no root needed. Run from the unpacked archive:
#   ./install.sh
# Puts the bundle in $XDG_DATA_HOME/samplewright/app (default ~/.local/share), the `samplewright`
# command in ~/.local/bin, and the menu entry, icons and AppStream file under $XDG_DATA_HOME.
# Every installed path is listed in app/installed-files; uninstall.sh removes exactly those.
# The preset library ($XDG_DATA_HOME/samplewright/library) and the model cache are never touched.
set -eu
here=$(cd "$(dirname "$0")" && pwd)
data="${XDG_DATA_HOME:-$HOME/.local/share}"
bindir="$HOME/.local/bin"
app="$data/samplewright/app"
id=org.samplewright.Samplewright
manifest="$app/installed-files"

[ -x "$here/samplewright/samplewright" ] || { echo "install.sh: run it from the unpacked archive (samplewright/ is missing)" >&2; exit 2; }
if [ -f "$manifest" ]; then
  echo "Replacing the Samplewright installed in $app"
  sh "$app/uninstall.sh" --quiet
fi

made=""
make_dir() {  # mkdir -p, remembering each folder it creates so uninstall.sh can remove it when empty
  missing=""
  d=$1
  while [ ! -d "$d" ]; do missing="$d
$missing"; d=$(dirname "$d"); done
  mkdir -p "$1"
  made="$made$missing"
}

make_dir "$app"
rm -rf "$app/bundle"  # a copy left by an interrupted install (no list of files was written)
cp -R "$here/samplewright" "$app/bundle"
cp "$here/uninstall.sh" "$here/THIRD-PARTY-NOTICES.txt" "$app/"
files="$app/uninstall.sh
$app/THIRD-PARTY-NOTICES.txt"

make_dir "$bindir"
if [ -e "$bindir/samplewright" ] || [ -L "$bindir/samplewright" ]; then
  echo "install.sh: $bindir/samplewright exists and is not ours; move it away first" >&2
  rm -rf "$app/bundle"; exit 2
fi
ln -s "$app/bundle/samplewright" "$bindir/samplewright"
files="$files
$bindir/samplewright"

install_file() {  # install_file SOURCE DEST-FOLDER [sed script]
  make_dir "$2"
  target="$2/$(basename "$1")"
  if [ -n "${3:-}" ]; then sed "$3" "$1" > "$target"; else cp "$1" "$target"; fi
  chmod 644 "$target"
  files="$files
$target"
}

exe="$app/bundle/samplewright"
# The menu may not search ~/.local/bin, so the entry names the executable by its full path.
install_file "$here/share/applications/$id.desktop" "$data/applications" "s|^Exec=.*|Exec=\"$exe\"|; s|^TryExec=.*|TryExec=$exe|"
install_file "$here/share/metainfo/$id.metainfo.xml" "$data/metainfo"
for icon in "$here"/share/icons/hicolor/*/apps/*; do
  size=$(basename "$(dirname "$(dirname "$icon")")")
  install_file "$icon" "$data/icons/hicolor/$size/apps"
done

{
  echo "# Installed by Samplewright's install.sh; uninstall.sh removes these and nothing else."
  echo "$files" | sed 's/^/file /'
  printf '%s' "$made" | grep -v '^$' | sed 's/^/dir /'
  echo "file $manifest"
} > "$manifest"

echo "Samplewright installed in $app"
case ":$PATH:" in
  *":$bindir:"*) echo "Start it from the application menu, or run: samplewright" ;;
  *) echo "Start it from the application menu, or run: $bindir/samplewright ($bindir is not on your PATH)" ;;
esac
echo "The first start converts the built-in model once (about a minute); later starts are quick."
