#!/usr/bin/env bash
# Tests scripts/check-packages.sh on made-up dependency files: a header of a package that the
# given list does not pull in (Boost's, from libboost1.74-dev) must fail with that package named;
# the same header passes once its package is listed; a header no package owns fails too.
set -u
guard="$(cd "$(dirname "$0")/../.." && pwd)/scripts/check-packages.sh"
d=$(mktemp -d); trap 'rm -rf "$d"' EXIT
boost=/usr/include/boost/version.hpp
[ -f "$boost" ] || { echo "SKIP: $boost missing (libboost-dev is in scripts/setup.sh)"; exit 1; }
owner=$(dpkg -S "$boost" | cut -d: -f1)
mkdir -p "$d/a" "$d/b"
printf 'x.o: ../x.cpp /usr/include/stdio.h \\\n %s\n' "$boost" >"$d/a/x.cpp.o.d"
printf 'y.o: ../y.cpp /usr/include/../include/stdio.h /usr/include/porebench-no-such-header.h\n' >"$d/b/y.cpp.o.d"
fails=0
check() {  # name, want_rc, want_fragment, command...
  local name=$1 want=$2 frag=$3; shift 3
  out=$("$@" 2>&1); rc=$?
  if [ "$rc" != "$want" ] || ! grep -qF -- "$frag" <<<"$out"; then
    echo "FAIL $name: exit $rc (want $want), output: $out"; fails=$((fails + 1))
  else echo "ok   $name"; fi
}
check "unlisted package named" 1 "'$owner'" env PB_GUARD_PACKAGES="g++" "$guard" "$d/a"
check "listed package passes" 0 "all installed by scripts/setup.sh" env PB_GUARD_PACKAGES="g++ libboost-dev" "$guard" "$d/a"
check "header of no package" 1 "belong to no Debian package" env PB_GUARD_PACKAGES="g++" "$guard" "$d/b"
check "unknown listed package" 2 "no-such-package-pb" env PB_GUARD_PACKAGES="g++ no-such-package-pb" "$guard" "$d/a"
echo "$((4 - fails)) passed, $fails failed"
[ $fails = 0 ]
