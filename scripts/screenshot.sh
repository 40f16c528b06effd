#!/usr/bin/env bash
# Renders DIR/report.html to DIR/report.png in headless Chromium, as a reader's browser would show
# it. Installs Debian's chromium when it is missing. When no install is possible (not root, no
# package source), prints "SKIPPED: <reason>" and exits 0, so CI on a machine without a browser
# still passes; every other failure exits non-zero.
#
# Usage: scripts/screenshot.sh DIR [WIDTH,HEIGHT]
set -euo pipefail

dir="${1:?usage: scripts/screenshot.sh DIR [WIDTH,HEIGHT]}"
size="${2:-1280,4000}"
if [[ ! -f "$dir/report.html" ]]; then
  echo "error: $dir/report.html is missing: run 'loancycle report $dir' first" >&2
  exit 2
fi

find_browser() {
  for name in chromium chromium-browser; do
    if command -v "$name" >/dev/null 2>&1; then
      command -v "$name"
      return 0
    fi
  done
  return 1
}

if ! browser="$(find_browser)"; then
  if [[ "$(id -u)" != "0" ]]; then
    echo "SKIPPED: chromium is not installed and installing it needs root"
    exit 0
  fi
  if ! command -v apt-get >/dev/null 2>&1; then
    echo "SKIPPED: chromium is not installed and there is no apt-get to install it"
    exit 0
  fi
  if ! apt-get update >/tmp/screenshot-apt.log 2>&1; then
    echo "SKIPPED: no package source reachable to install chromium (see /tmp/screenshot-apt.log)"
    exit 0
  fi
  if ! DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends chromium >>/tmp/screenshot-apt.log 2>&1; then
    echo "SKIPPED: chromium could not be installed (see /tmp/screenshot-apt.log)"
    exit 0
  fi
  browser="$(find_browser)" || { echo "SKIPPED: chromium installed but not found on PATH"; exit 0; }
fi

profile="$(mktemp -d)"
trap 'rm -rf "$profile"' EXIT
html="$(cd "$dir" && pwd)/report.html"
png="$(cd "$dir" && pwd)/report.png"
rm -f "$png"
# Every network feature is switched off: the report must render from the file alone.
timeout 120 "$browser" --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
  --disable-background-networking --disable-component-update --disable-sync \
  --hide-scrollbars --user-data-dir="$profile" \
  --screenshot="$png" --window-size="$size" "file://$html" >/dev/null 2>"$profile/stderr" || {
  cat "$profile/stderr" >&2
  echo "error: chromium failed to render $html" >&2
  exit 1
}
if [[ ! -s "$png" ]]; then
  cat "$profile/stderr" >&2
  echo "error: chromium wrote no screenshot to $png" >&2
  exit 1
fi
echo "wrote $png"
