#!/usr/bin/env bash
# Renders the real viewer window under Xvfb on the demo cohort (generated into
# a fresh folder, as on a first start), saves a screenshot and checks that it
# is not blank. The PNG stays in out/screenshot/ for people to look at.
set -euo pipefail
cd "$(dirname "$0")/.."
GO=${GO:-go}
bin=bin/brightfold
out=out/screenshot
mkdir -p "$out" bin
$GO build -o "$bin" ./cmd/brightfold
if ! command -v xvfb-run >/dev/null; then
	echo "screenshot-check: xvfb-run missing (make setup installs xvfb)" >&2
	exit 1
fi
demo=$(mktemp -d)
trap 'rm -rf "$demo"' EXIT
rm -f "$out/viewer.png"
# Mesa's llvmpipe cannot read back the front buffer under Xvfb (the capture
# comes back empty); softpipe can.
export LANG=C.UTF-8 GALLIUM_DRIVER=${GALLIUM_DRIVER:-softpipe}
xvfb-run -a -s "-screen 0 1600x1000x24" \
	"$bin" view --demo-dir "$demo" --screenshot "$out/viewer.png" 2> >(grep -v "locale\|Cause: language\|At: .*lang/locale.go" >&2)
$GO run ./scripts/pngcheck "$out/viewer.png"
echo "screenshot-check: ok ($out/viewer.png)"
