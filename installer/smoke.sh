#!/usr/bin/env bash
# The bundle's end-to-end check (`make installer-test`; minutes, so not part of `make test`).
# Builds the archive unless one newer than every source file exists, installs it into a temporary
# HOME and checks from there with a plain PATH (no virtualenv, no Python of the build):
# --version, check on a valid and an invalid settings file, a one-sample audition with --json,
# the window's --self-test (first start converts the model, second start reuses it), the desktop
# entry and AppStream file validators, then uninstall.sh keeping the user's library.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
PY=${PY:-$root/.venv/bin/python}
cd "$root"

need_tools() {
  command -v desktop-file-validate >/dev/null && command -v appstreamcli >/dev/null && return 0
  if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null; then
    echo "Installing desktop-file-utils and appstream"
    apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq desktop-file-utils appstream >/dev/null
  else
    echo "smoke.sh: install desktop-file-utils and appstream first" >&2; exit 2
  fi
}
need_tools
bash tools/ensure-qt-libs.sh

stem=$("$PY" -c 'import sys; sys.path.insert(0, "installer"); import bundle_info as b; print(b.archive_stem(b.checked_version()))')
version=${stem#samplewright-}; version=${version%-*-*}
archive="dist/$stem.tar.gz"
if [ ! -f "$archive" ] || [ -n "$(find src installer pyproject.toml -type f -newer "$archive" -not -path '*/__pycache__/*' -not -path '*.egg-info/*' -not -name smoke.sh -not -name '*.md' -print -quit)" ]; then
  "$PY" installer/build.py
fi

scratch=$(mktemp -d /tmp/samplewright-smoke.XXXXXX)
trap 'rm -rf "$scratch"' EXIT
home="$scratch/home"
mkdir -p "$home" "$scratch/unpacked"
tar -xzf "$archive" -C "$scratch/unpacked"
failures=0
pass() { echo "ok    $*"; }
fail() { echo "FAIL  $*"; failures=$((failures + 1)); }
# Everything below runs as the colleague would: a fresh HOME, a PATH without any virtualenv.
as_user() { env -i HOME="$home" PATH="$home/.local/bin:/usr/local/bin:/usr/bin:/bin" LANG=C.UTF-8 "$@"; }
now() { date +%s.%N; }
since() { awk -v a="$1" -v b="$(now)" 'BEGIN { printf "%.1f", b - a }'; }

as_user sh "$scratch/unpacked/$stem/install.sh" > "$scratch/install.log" && pass "install.sh" || fail "install.sh: $(cat "$scratch/install.log")"
data="$home/.local/share"
app="$data/samplewright/app"
id=org.samplewright.Samplewright
cp "$app/installed-files" "$scratch/installed-files"
case "$(as_user sh -c 'command -v samplewright')" in
  "$home/.local/bin/samplewright") pass "samplewright is on PATH from ~/.local/bin" ;;
  *) fail "samplewright is not found in ~/.local/bin" ;;
esac
for size in scalable 16x16 32x32 48x48 64x64 128x128 256x256 512x512; do
  ls "$data/icons/hicolor/$size/apps/$id".* >/dev/null 2>&1 || fail "icon $size missing"
done
pass "icons installed (SVG and PNG sizes)"
notices="$app/THIRD-PARTY-NOTICES.txt"
missing=""
for name in torch transformers numpy PySide6_Essentials shiboken6; do grep -qx "$name" "$notices" || missing="$missing $name"; done
grep -q "Replacing the Qt libraries" "$notices" || missing="$missing (how to replace Qt)"
grep -q "SmolLM2-135M-Instruct" "$notices" || missing="$missing (the model)"
[ -z "$missing" ] && pass "third-party notices cover Qt (and how to replace it), torch, transformers, numpy, the model" \
  || fail "third-party notices lack:$missing"
linked=$(find "$app/bundle" -type f -name '*.so*' -print0 | xargs -0 -n 64 ldd 2>/dev/null | grep -E '/\.venv/|/\.pyenv/' | sort -u || true)
[ -z "$linked" ] && pass "bundle's libraries need nothing from a Python installation" || fail "libraries outside the bundle: $linked"

out=$(as_user samplewright --version) && [ "$out" = "samplewright $version" ] && pass "--version: $out" || fail "--version printed '$out'"
starter="$app/bundle/_internal/samplewright/resources/presets/starter.json"
as_user samplewright check "$starter" >/dev/null && pass "check accepts the starter settings file" || fail "check refused a valid file"
echo '{"format": "something-else"}' > "$scratch/bad.json"
set +e; as_user samplewright check "$scratch/bad.json" 2>"$scratch/check.err"; code=$?; set -e
[ "$code" = 2 ] && pass "check refuses an invalid file (exit 2): $(cat "$scratch/check.err")" || fail "check on an invalid file exited $code"

start=$(now)
as_user samplewright --self-test > "$scratch/first.log" 2>&1 && first=$(since "$start") && pass "first start (--self-test, converts the model): ${first} s; $(grep self-test "$scratch/first.log")" \
  || fail "first --self-test: $(tail -5 "$scratch/first.log")"
grep -q "conversion dialog shown" "$scratch/first.log" && pass "first start showed the conversion dialog" || fail "no conversion dialog on first start"
grep -q "notices: $app/bundle/_internal/THIRD-PARTY-NOTICES.txt" "$scratch/first.log" && pass "About finds the notices" || fail "About does not find the notices"
start=$(now)
as_user samplewright --self-test > "$scratch/second.log" 2>&1 && second=$(since "$start") && pass "second start (--self-test): ${second} s" \
  || fail "second --self-test: $(tail -5 "$scratch/second.log")"

if as_user samplewright audition --samples 1 --tokens 4 --json > "$scratch/audition.json" 2>"$scratch/audition.err"; then
  if /usr/bin/env python3 - "$scratch/audition.json" <<'PYEOF'
import json, sys
report = json.load(open(sys.argv[1], encoding="utf-8"))
presets = report["presets"]
assert presets, "no presets"
for entry in presets:
    (sample,) = entry["samples"]
    assert 1 <= len(sample["token_ids"]) <= 4, sample
print(f"{len(presets)} presets, one sample of at most 4 tokens each")
PYEOF
  then pass "audition --json parsed"; else fail "audition --json output: $(head -c 300 "$scratch/audition.json")"; fi
else
  fail "audition: $(tail -3 "$scratch/audition.err")"
fi

mkdir -p "$scratch/one-passage"
echo "Dear passengers, from Monday the early crossing leaves ten minutes later." > "$scratch/one-passage/notice.txt"
if as_user samplewright evaluate --passages "$scratch/one-passage" --preset "Greedy baseline" --samples 1 --tokens 4 --seed 1 \
    --out "$scratch/run.json" --report "$scratch/run.html" > "$scratch/evaluate.log" 2>&1 \
    && grep -q "data:image/png;base64," "$scratch/run.html"; then
  pass "evaluate writes a run file and an HTML report with its map"
else
  fail "evaluate/report: $(tail -3 "$scratch/evaluate.log")"
fi

desktop-file-validate "$data/applications/$id.desktop" && pass "desktop-file-validate" || fail "desktop-file-validate"
exec_path=$(sed -n 's/^Exec="\{0,1\}\([^"]*\)"\{0,1\}$/\1/p' "$data/applications/$id.desktop")
[ -x "$exec_path" ] && pass "desktop entry starts $exec_path" || fail "desktop entry Exec '$exec_path' is not executable"
appstreamcli validate --no-net "$data/metainfo/$id.metainfo.xml" >/dev/null && pass "appstreamcli validate" || fail "appstreamcli validate"

mkdir -p "$data/samplewright/library"
echo '{"kept": true}' > "$data/samplewright/library/colleague-preset.json"
as_user sh "$app/uninstall.sh" >/dev/null && pass "uninstall.sh" || fail "uninstall.sh"
left=$(sed -n 's/^file //p' "$scratch/installed-files" | while IFS= read -r f; do [ -e "$f" ] || [ -L "$f" ] && echo "$f"; done || true)
[ -z "$left" ] && [ ! -e "$app" ] && pass "uninstall left no installed file" || fail "left behind: $left"
[ -f "$data/samplewright/library/colleague-preset.json" ] && pass "uninstall kept the library" || fail "uninstall removed the library"
[ -d "$home/.cache/samplewright/models" ] && pass "uninstall kept the model cache" || fail "model cache gone"

mib=$(du -sm "$scratch/unpacked/$stem/samplewright" | cut -f1)
echo "bundle: ${mib} MiB unpacked, archive $(du -m "$archive" | cut -f1) MiB; first start ${first:-?} s, second start ${second:-?} s"
echo "machine: $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //'), $(nproc) cores"
if [ "$failures" = 0 ]; then echo "installer smoke: 0 failed"; else echo "installer smoke: $failures failed"; exit 1; fi
