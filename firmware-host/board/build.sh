#!/bin/sh
# Cross-build kermalux for the boards: 32-bit ARMv6 (Pi Zero/1), ARMv7
# (Pi 2/3 on a 32-bit OS) and 64-bit ARM, without cgo. Run from anywhere
# inside the checkout; binaries land in dist/ (or in $DIST if set).
set -eu
root=$(git -C "$(dirname "$0")" rev-parse --show-toplevel)
cd "$root"
dist=${DIST:-dist}
mkdir -p "$dist"
version=$(git describe --always --dirty 2>/dev/null || echo unknown)
build() {
	out=$dist/kermalux-linux-$1
	echo "building $out"
	CGO_ENABLED=0 GOOS=linux GOARCH=$2 GOARM=$3 \
		go build -trimpath -tags board -ldflags "-s -w -X main.version=$version" -o "$out" ./cmd/kermalux
}
build armv6 arm 6
build armv7 arm 7
build arm64 arm64 ""
echo "built $version:"
ls -l "$dist"/kermalux-linux-*
