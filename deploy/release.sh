#!/usr/bin/env bash
# Build etpulse release binaries and Debian packages.
#
#   bash deploy/release.sh [--arch "amd64 arm64 armhf"] [--out DIR] [--version V]
#
# For each architecture: a static binary (CGO_ENABLED=0, -trimpath, symbol
# tables stripped) stamped with the version (default: git describe) and the
# commit (etpulse --version prints both), named
# etpulse-VERSION-linux-ARCH, and a .deb built with dpkg-deb that installs
#   /usr/bin/etpulse
#   /lib/systemd/system/etpulse.service   (deploy/etpulse.service, binary path /usr/bin)
#   /etc/etpulse/etpulse.yaml             (deploy/etpulse.example.yaml, a conffile)
# and on configure creates the system user etpulse and /var/lib/etpulse
# (deploy/debian/postinst); a purge removes both (deploy/debian/postrm).
# Architectures use Debian's names: amd64, arm64, armhf (GOARCH=arm GOARM=7).
# Without dpkg-deb only the binaries are built. Output goes to dist/ unless
# --out says otherwise; SHA256SUMS lists every file.
set -euo pipefail

root=$(cd "$(dirname "$0")/.." && pwd)
cd "$root"
arches="amd64 arm64 armhf"
out=dist
version=""
while [ $# -gt 0 ]; do
	case $1 in
	--arch) arches=$2; shift 2 ;;
	--out) out=$2; shift 2 ;;
	--version) version=$2; shift 2 ;;
	-h|--help) sed -n '2,16p' "$0" | sed 's/^# \{0,1\}//'; exit 0 ;;
	*) echo "release.sh: unknown argument $1 (see --help)" >&2; exit 2 ;;
	esac
done
if [ -z "$version" ]; then
	version=$(git describe --tags --always --dirty 2>/dev/null || echo dev)
fi
revision=$(git rev-parse HEAD 2>/dev/null || echo unknown)
if [ -n "$(git status --porcelain --untracked-files=no 2>/dev/null)" ]; then
	revision=$revision-dirty
fi
# Debian versions start with a digit: v1.2.0-3-gabc1234 -> 1.2.0+3.gabc1234;
# an untagged tree gives 0.0.0+gHASH.
debversion=${version#v}
case $debversion in
[0-9]*.[0-9]*) ;;
*) debversion=0.0.0+g$debversion ;;
esac
debversion=$(printf '%s' "$debversion" | sed 's/-/+/; s/-/./g')

mkdir -p "$out"
out=$(cd "$out" && pwd)
for arch in $arches; do
	case $arch in
	amd64) goarch=amd64 goarm= ;;
	arm64) goarch=arm64 goarm= ;;
	armhf) goarch=arm goarm=7 ;;
	*) echo "release.sh: unknown architecture $arch (amd64, arm64, armhf)" >&2; exit 2 ;;
	esac
	bin=$out/etpulse-$version-linux-$arch
	echo "building $bin" >&2
	CGO_ENABLED=0 GOOS=linux GOARCH=$goarch GOARM=$goarm \
		go build -trimpath -ldflags "-s -w -X main.version=$version -X main.revision=$revision" -o "$bin" ./cmd/etpulse

	command -v dpkg-deb >/dev/null || continue
	pkg=$(mktemp -d)
	trap 'rm -rf "$pkg"' EXIT
	chmod 0755 "$pkg"
	install -D -m 0755 "$bin" "$pkg/usr/bin/etpulse"
	install -d -m 0755 "$pkg/lib/systemd/system" "$pkg/etc/etpulse" "$pkg/DEBIAN" "$pkg/usr/share/doc/etpulse"
	sed 's|/usr/local/bin/etpulse|/usr/bin/etpulse|g' deploy/etpulse.service >"$pkg/lib/systemd/system/etpulse.service"
	chmod 0644 "$pkg/lib/systemd/system/etpulse.service"
	install -m 0640 deploy/etpulse.example.yaml "$pkg/etc/etpulse/etpulse.yaml"
	install -m 0644 deploy/etpulse.example.yaml "$pkg/usr/share/doc/etpulse/etpulse.example.yaml"
	for script in postinst prerm postrm; do
		install -m 0755 "deploy/debian/$script" "$pkg/DEBIAN/$script"
	done
	echo /etc/etpulse/etpulse.yaml >"$pkg/DEBIAN/conffiles"
	size=$(du -k -s "$pkg" | cut -f1)
	sed -e "s/@VERSION@/$debversion/" -e "s/@ARCH@/$arch/" -e "s/@SIZE@/$size/" deploy/debian/control >"$pkg/DEBIAN/control"
	dpkg-deb --root-owner-group -Zxz --build "$pkg" "$out/etpulse_${debversion}_$arch.deb" >&2
	rm -rf "$pkg"
	trap - EXIT
done
(cd "$out" && sha256sum etpulse-"$version"-linux-* etpulse_"$debversion"_*.deb 2>/dev/null >SHA256SUMS || true)
ls -l "$out" >&2
