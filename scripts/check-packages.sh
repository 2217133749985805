#!/usr/bin/env bash
# Guard: every system header the build read comes from a Debian package that scripts/setup.sh
# installs, or from a dependency of one. A header from a package installed by hand (or from no
# package at all, e.g. /usr/local) fails with the package named, so a fresh machine cannot be
# missing it. Reads the compiler's dependency files (*.o.d) under BUILD_DIR.
# Usage: scripts/check-packages.sh BUILD_DIR   (PB_GUARD_PACKAGES="a b" replaces setup.sh's list)
set -euo pipefail
build=${1:?usage: check-packages.sh BUILD_DIR}
here=$(cd "$(dirname "$0")" && pwd)
listed=${PB_GUARD_PACKAGES:-$("$here/setup.sh" --list)}
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

find "$build" -name '*.o.d' -print0 | xargs -0 -r cat | tr ' \\' '\n\n' | grep -E '^/usr/' |
  sed 's/:$//' | sort -u >"$tmp/raw"
if [ ! -s "$tmp/raw" ]; then
  echo "check-packages: no dependency files (*.o.d) naming system headers under $build" >&2
  exit 2
fi
# Normalise ".." without resolving links (dpkg lists the path the package ships), then, for paths
# no package lists, the resolved path too.
xargs -r realpath -ms <"$tmp/raw" | sort -u >"$tmp/headers"
owners() {  # stdin: paths; stdout: "package path"
  grep -F -x -H -f - /var/lib/dpkg/info/*.list 2>/dev/null |
    sed -E 's#^/var/lib/dpkg/info/([^:/]+)(:[a-z0-9_]+)?\.list:#\1 #' || true
}
owners <"$tmp/headers" | sort -u >"$tmp/owned"
cut -d' ' -f2- "$tmp/owned" | sort -u | comm -23 "$tmp/headers" - >"$tmp/unowned"
: >"$tmp/orphans"
while IFS= read -r h; do
  r=$(readlink -f "$h" || echo "$h")
  o=$(printf '%s\n' "$r" | owners | head -1)
  if [ -n "$o" ]; then echo "${o%% *} $h" >>"$tmp/owned"; else echo "$h" >>"$tmp/orphans"; fi
done <"$tmp/unowned"

# Packages setup.sh installs, with everything they depend on (pre-depends included).
# shellcheck disable=SC2086
apt-cache depends --recurse --no-recommends --no-suggests --no-conflicts --no-breaks --no-replaces \
  --no-enhances $listed 2>/dev/null | tr -s ' \t' '\n\n' | grep -v ':$' | tr -d '<>|' | sed 's/:.*//' |
  grep -v '^$' | sort -u >"$tmp/allowed"
for p in $listed; do
  grep -qx "$p" "$tmp/allowed" || { echo "check-packages: apt-cache knows no package '$p' (listed in scripts/setup.sh)" >&2; exit 2; }
done

fail=0
for pkg in $(cut -d' ' -f1 "$tmp/owned" | sort -u); do
  grep -qx "$pkg" "$tmp/allowed" && continue
  h=$(grep -m1 "^$pkg " "$tmp/owned" | cut -d' ' -f2-)
  n=$(grep -c "^$pkg " "$tmp/owned")
  echo "check-packages: $h (and $((n - 1)) more headers) come from Debian package '$pkg', which scripts/setup.sh neither installs nor pulls in as a dependency: add it to setup.sh" >&2
  fail=1
done
if [ -s "$tmp/orphans" ]; then
  echo "check-packages: $(wc -l <"$tmp/orphans") system headers belong to no Debian package (installed by hand?), e.g. $(head -1 "$tmp/orphans")" >&2
  fail=1
fi
[ $fail = 0 ] && echo "check-packages: $(wc -l <"$tmp/headers") system headers from $(cut -d' ' -f1 "$tmp/owned" | sort -u | wc -l) packages, all installed by scripts/setup.sh"
exit $fail
