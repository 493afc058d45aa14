#!/usr/bin/env bash
# Renders the real viewer window under Xvfb on the demo cohort, generated on
# the first run into out/screenshot/demo as on a user's first start, saves a
# screenshot once the first case shows its score, fit check and relevance
# map, and checks that it is not blank and carries the notice banner. The
# PNG stays in out/screenshot/viewer.png for people to look at.
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
demo=$out/demo
rm -f "$out/viewer.png"
# Mesa's llvmpipe cannot read back the front buffer under Xvfb (the capture
# comes back empty); softpipe can.
export LANG=C.UTF-8 GALLIUM_DRIVER=${GALLIUM_DRIVER:-softpipe}
xvfb-run -a -s "-screen 0 1600x1000x24" \
	"$bin" view --demo-dir "$demo" --screenshot "$out/viewer.png" 2> >(grep -v "locale\|Cause: language\|At: .*lang/locale.go" >&2)
# The banner colour is colChalk of app/theme.go.
$GO run ./scripts/pngcheck -banner ece1c6 "$out/viewer.png"
echo "screenshot-check: ok ($out/viewer.png)"
