#!/usr/bin/env bash
# Same bytes before and after a change that must not change behaviour.
#
# Builds limpid at BASE (a git revision, default HEAD: the last commit, for
# an uncommitted refactoring; the package layout change was checked against
# b78008b) and from the working tree, runs the same fixed set of
# commands with both (demo scene, the 256 px fixture, the grid, particle,
# automatic, COG, stdin/stdout and Arrow stream routes, PSF measurement,
# simulate, noise, assess) and compares every output:
#   - rasters: every pixel byte (GDAL's raw ENVI dump) and every metadata item
#     of every domain (gdalinfo -json), except the processing time stamps;
#   - Arrow streams, PNG, CSV, kernel files and stdout tables: byte for byte;
#   - JSON reports: every field except wall times ("wall_seconds",
#     "finished" and the particle timing breakdown);
#   - HTML reports: every line except the wall time and finish time.
#
# Usage: scripts/samebytes/run.sh [BASE]      (needs gdal-bin and python3)
# Exit status 0 when everything matches, 1 with the list of differences.
set -euo pipefail
BASE=${1:-HEAD}
ROOT=$(git -C "$(dirname "$0")" rev-parse --show-toplevel)
WORK=$(mktemp -d "${TMPDIR:-/tmp}/limpid-samebytes.XXXXXX")
trap 'git -C "$ROOT" worktree remove --force "$WORK/base-src" >/dev/null 2>&1 || true; rm -rf "$WORK"' EXIT

echo "building $BASE and the working tree"
git -C "$ROOT" worktree add --detach "$WORK/base-src" "$BASE" >/dev/null 2>&1
(cd "$WORK/base-src" && go build -o "$WORK/limpid-base" ./cmd/limpid)
(cd "$ROOT" && go build -o "$WORK/limpid-new" ./cmd/limpid)

FIX=$ROOT/testdata/valley256/observed.tif
REF=$ROOT/testdata/valley256/reference.tif

# run_set BIN DIR: the fixed command set. Each command's stdout goes to a
# file of its own; stderr (logs, progress) is not compared.
run_set() {
	local L=$1 D=$2
	mkdir -p "$D"
	cd "$D"
	export LIMPID_WORKERS=2
	"$L" demo --out demo --size 192 --particles-per-pixel 4 >demo.stdout
	"$L" restore --psf gaussian:sigma=1.4 --report auto.json --report-html auto.html --quicklook auto.png "$FIX" auto.tif
	"$L" restore --psf gaussian:sigma=1.4 --choose per-tile --tile 128 --report pertile.json "$FIX" pertile.tif
	"$L" restore --psf gaussian:sigma=1.4 --smooth 0.2 --stop change --bands 3,1 --output-type float32 --report fixed.json "$FIX" fixed.tif
	"$L" restore --psf gaussian:sigma=1.4 --smooth 0.3 --stop discrepancy --background auto --report disc.json "$FIX" disc.tif
	"$L" restore --psf gaussian:sx=1.6,sy=1.1,angle=20 --smooth 0.2 --stop change --iterations 15 --format cog "$FIX" aniso_cog.tif
	"$L" restore --psf gaussian:sigma=1.4 --method particle --particles-per-pixel 4 --iterations 20 --bands 2 \
		--uncertainty part_se.tif --report part.json --report-html part.html "$FIX" part.tif || echo "particle html: exit $?" >>notes.txt
	"$L" restore --psf gaussian:sigma=1.4 --method particle --particles-per-pixel 4 --iterations 20 --bands 2 \
		--uncertainty part2_se.tif --report part2.json "$FIX" part2.tif
	"$L" restore --psf auto --smooth 0.2 --stop change --report psfauto.json "$FIX" psfauto.tif
	"$L" restore --psf gaussian:sigma=1.4 --smooth 0.2 --stop change --iterations 10 - - <"$FIX" >stdio.tif
	"$L" tiles pack --tile 128 --overlap 32 "$FIX" packed.arrow
	"$L" tiles pack --tile 128 --overlap 32 --compress zstd --bands 2,4 "$FIX" packed_zstd.arrow
	"$L" restore --input-format arrow --output-format arrow --psf gaussian:sigma=1.4 --smooth 0.2 --stop change packed.arrow restored.arrow
	"$L" restore --input-format arrow --output-format arrow --method particle --particles-per-pixel 4 --iterations 10 --smooth 0.2 \
		--psf gaussian:sigma=1.4 packed.arrow restored_part.arrow
	"$L" tiles unpack restored.arrow unpacked.tif
	"$L" tiles unpack --format cog --output-type float32 restored_part.arrow unpacked_part.tif
	"$L" restore --output-format arrow --tile 128 --psf gaussian:sigma=1.4 --smooth 0.2 --stop change "$FIX" raster2arrow.arrow
	"$L" restore --input-format arrow --psf gaussian:sigma=1.4 --smooth 0.2 --stop change packed.arrow arrow2raster.tif
	"$L" noise --json noise.json "$FIX" >noise.stdout
	"$L" psf build gaussian:sigma=1.2 built.txt
	"$L" psf build airy:wavelength=0.65,fnumber=8,pitch=5.5 built_airy.tif || echo "psf build airy: exit $?" >>notes.txt
	"$L" psf measure --auto --band 3 --json measure.json --csv measure --kernel measure_kernel.txt --png measure.png "$FIX" >measure.stdout
	"$L" restore --psf measured:measure.json --smooth 0.2 --stop change --iterations 10 "$FIX" measured.tif || echo "measured: exit $?" >>notes.txt
	"$L" restore --psf kernel:built.txt --smooth 0 --stop change --iterations 10 "$FIX" kernel.tif
	"$L" simulate --psf gaussian:sigma=1.4 --noise poisson:gain=0.4,read=3 --quantize UInt16 --seed 5 "$REF" sim.tif
	"$L" simulate --psf gaussian:sigma=1 --noise gaussian:sigma=2 --quantize Float32 --seed 3 --format cog "$REF" sim_cog.tif
	"$L" assess --reference "$REF" --data-range 4095 --json assess.json "$FIX" auto.tif >assess.stdout
	"$L" assess --json assess_noref.json "$FIX" part.tif >assess_noref.stdout || true
	# Bad inputs: the exit status and the error line are behaviour too.
	for args in "restore --psf gaussian:sigma=-1 $FIX bad.tif" "restore --psf gaussian:sigma=1 --smooth x $FIX bad.tif" \
		"restore --psf gaussian:sigma=1 /nonexistent.tif bad.tif" "tiles unpack $FIX bad.tif"; do
		set +e
		# shellcheck disable=SC2086
		"$L" $args >/dev/null 2>err.txt
		echo "$args -> $? $(tail -1 err.txt)" >>errors.txt
		set -e
	done
	rm -f err.txt
	cd - >/dev/null
}

echo "running the command set with $BASE"
run_set "$WORK/limpid-base" "$WORK/base"
echo "running the command set with the working tree"
run_set "$WORK/limpid-new" "$WORK/new"

# normalize FILE: print a comparable form of FILE on stdout.
normalize() {
	local f=$1
	case "$f" in
	*.tif)
		(cd "$(dirname "$f")" && gdalinfo -json -mdd all "$(basename "$f")") | python3 -c '
import json, re, sys
drop = re.compile(r"(?i)(wall|seconds|finished|timing|^files$|^DERIVED_SUBDATASET)")
def clean(v):
    if isinstance(v, dict):
        return {k: clean(x) for k, x in v.items() if not drop.search(k)}
    if isinstance(v, list):
        return [clean(x) for x in v]
    if isinstance(v, str) and v.lstrip().startswith("{"):
        try:
            return clean(json.loads(v))
        except ValueError:
            return v
    return v
print(json.dumps(clean(json.load(sys.stdin)), indent=1, sort_keys=True))'
		local raw
		raw=$(mktemp "$WORK/raw.XXXXXX")
		gdal_translate -q -of ENVI "$f" "$raw.bil"
		sha256sum <"$raw.bil"
		rm -f "$raw" "$raw".*
		;;
	*.json)
		python3 -c '
import json, re, sys
drop = re.compile(r"(?i)(wall|seconds|finished|timing)")
def clean(v):
    if isinstance(v, dict):
        return {k: clean(x) for k, x in v.items() if not drop.search(k)}
    if isinstance(v, list):
        return [clean(x) for x in v]
    return v
print(json.dumps(clean(json.load(open(sys.argv[1]))), indent=1, sort_keys=True))' "$f"
		;;
	*.html)
		sed -E -e 's/[0-9]+(\.[0-9]+)? s</T s</g' -e 's/[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9:]+Z/TIME/g' "$f"
		;;
	*.stdout)
		sed -E -e 's/in [0-9.]+ ?(ms|s|m[0-9.]+s)/in T/g' -e 's/[0-9]+(\.[0-9]+)? s\b/T s/g' "$f"
		;;
	*) cat "$f" ;;
	esac
}

status=0
n=0
while IFS= read -r rel; do
	n=$((n + 1))
	if [ ! -e "$WORK/new/$rel" ]; then
		echo "MISSING in working tree: $rel"
		status=1
		continue
	fi
	if ! cmp -s <(normalize "$WORK/base/$rel") <(normalize "$WORK/new/$rel"); then
		echo "DIFFERS: $rel"
		diff <(normalize "$WORK/base/$rel") <(normalize "$WORK/new/$rel") | head -20 || true
		status=1
	fi
done < <(cd "$WORK/base" && find . -type f ! -name '*.aux.xml' | sort)
while IFS= read -r rel; do
	[ -e "$WORK/base/$rel" ] || { echo "EXTRA in working tree: $rel"; status=1; }
done < <(cd "$WORK/new" && find . -type f ! -name '*.aux.xml' | sort)

if [ $status = 0 ]; then
	echo "same: $n outputs of $BASE and the working tree match"
else
	echo "differences found (see above)"
fi
exit $status
