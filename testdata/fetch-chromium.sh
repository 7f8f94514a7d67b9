#!/usr/bin/env bash
# Makes sure Debian's chromium is there for the browser test of
# checkpoint/runs/report (the morning report loaded headless, offline).
# Run as root with apt-get at hand, it installs the package (about a
# minute, once); otherwise it says what is missing. The test itself skips
# without chromium, and fails without it under CI (CI=true).
set -euo pipefail
for b in ${WEFT_CHROMIUM:-} chromium chromium-browser; do
	command -v "$b" >/dev/null 2>&1 && exit 0
done
if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
	echo "fetch-chromium: installing Debian's chromium for the browser test (apt-get install -y chromium)" >&2
	export DEBIAN_FRONTEND=noninteractive
	apt-get install -y -q chromium >/dev/null || { apt-get update -q >/dev/null && apt-get install -y -q chromium >/dev/null; }
	exit 0
fi
echo "fetch-chromium: chromium is missing, so the browser test of checkpoint/runs/report will be skipped (CI fails it): install it with 'apt-get install -y chromium' as root, or set WEFT_CHROMIUM to a chromium binary" >&2
