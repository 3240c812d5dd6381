#!/usr/bin/env bash
# Side-by-side comparison of `priceiv estimate` with a reference pipeline
# written with general-purpose libraries only (tests/bench/reference_pipeline.py:
# Python with Debian's python3-numpy and python3-pandas), on the same
# generated panel, in the same run.
#
# The panel (tests/bench/gen): 20 products x 800 stores, each product-store
# pair sold for a random stretch of 50-200 of 200 weeks (about 2M rows), an
# endogenous price and two cost shifters. The model: log-log 2SLS of units
# on price, shifters bean and freight, product*store and week effects
# absorbed, errors clustered by store.
#
# Prints the wall time and peak memory (/usr/bin/time -v) of each, their
# ratios, the bootstrap cost, and checks that the elasticities and standard
# errors agree to 1e-6 relative; exits non-zero, loudly, if they do not.
#
# Usage: bash tests/bench/compare.sh [--large]
#   --large  also times priceiv alone on about 10M rows (4000 stores)
# Environment: PRICEIV_BENCH_DIR keeps the files in that folder (default:
# a temporary folder, removed at the end).
set -euo pipefail
cd "$(dirname "$0")/../.."
ROOT=$(pwd)
LARGE=0
[[ "${1:-}" == "--large" ]] && LARGE=1

PY=/usr/bin/python3
need=()
[[ -x /usr/bin/time ]] || need+=(time)
[[ -x $PY ]] || need+=(python3)
if [[ -x $PY ]]; then
	$PY -c 'import numpy' 2>/dev/null || need+=(python3-numpy)
	$PY -c 'import pandas' 2>/dev/null || need+=(python3-pandas)
else
	need+=(python3-numpy python3-pandas)
fi
if ((${#need[@]})); then
	echo "installing ${need[*]} (Debian packages) ..."
	apt-get update -qq
	DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${need[@]}" >/dev/null
fi

if [[ -n "${PRICEIV_BENCH_DIR:-}" ]]; then
	WORK=$PRICEIV_BENCH_DIR
	mkdir -p "$WORK"
else
	WORK=$(mktemp -d)
	trap 'rm -rf "$WORK"' EXIT
fi

go build -o "$WORK/priceiv" ./cmd/priceiv
go build -o "$WORK/gen" ./tests/bench/gen
[[ -f "$WORK/panel.csv" ]] || "$WORK/gen" -out "$WORK/panel.csv"

MODEL=(--quantity units --price price --shifters bean,freight --fe 'product*store,week' --cluster store --format json)

# timed NAME CMD...: runs CMD under /usr/bin/time -v, output to $WORK/NAME.out
timed() {
	local name=$1
	shift
	if ! /usr/bin/time -v -o "$WORK/$name.time" "$@" >"$WORK/$name.out" 2>"$WORK/$name.err"; then
		cat "$WORK/$name.err" >&2
		echo "compare: $name failed" >&2
		exit 1
	fi
}

echo "machine: $(nproc) cores, load average $(cut -d' ' -f1-3 /proc/loadavg); $(go version | cut -d' ' -f3); $($PY -c 'import numpy, pandas; print("numpy", numpy.__version__, "pandas", pandas.__version__)')"
echo "panel: $(($(wc -l <"$WORK/panel.csv") - 1)) rows, $(du -m "$WORK/panel.csv" | cut -f1) MB"
# Warm the page cache so that neither run pays for the first read.
cat "$WORK/panel.csv" >/dev/null
# Each run is made twice, alternating, so that a burst of other work on
# the machine does not decide the comparison: the faster wall time and the
# larger peak memory of the two are reported. The bootstrap's cost is the
# difference between runs that differ only by --bootstrap 999.
for round in 1 2; do
	timed priceiv$round "$WORK/priceiv" estimate "$WORK/panel.csv" "${MODEL[@]}"
	timed reference$round $PY tests/bench/reference_pipeline.py "$WORK/panel.csv"
	timed bootstrap$round "$WORK/priceiv" estimate "$WORK/panel.csv" "${MODEL[@]}" --bootstrap 999
done
"$WORK/priceiv" convert "$WORK/panel.csv" --out "$WORK/panel.parquet" >/dev/null
timed parquet "$WORK/priceiv" estimate "$WORK/panel.parquet" "${MODEL[@]}"
if ((LARGE)); then
	[[ -f "$WORK/panel10m.csv" ]] || "$WORK/gen" -stores 4000 -out "$WORK/panel10m.csv"
	cat "$WORK/panel10m.csv" >/dev/null
	timed large "$WORK/priceiv" estimate "$WORK/panel10m.csv" "${MODEL[@]}"
fi

WORK="$WORK" LARGE="$LARGE" $PY - <<'EOF'
import json, os, re, sys

work = os.environ["WORK"]

def usage1(name):
    text = open(os.path.join(work, name + ".time")).read()
    wall = re.search(r"Elapsed \(wall clock\) time \(h:mm:ss or m:ss\): (\S+)", text).group(1)
    secs = 0.0
    for part in wall.split(":"):
        secs = secs * 60 + float(part)
    rss = int(re.search(r"Maximum resident set size \(kbytes\): (\d+)", text).group(1)) / 1024
    return secs, rss

def usage(name):
    """Faster wall time and larger peak memory of the runs of name."""
    runs = [usage1(name + r) for r in ("1", "2") if os.path.exists(os.path.join(work, name + r + ".time"))]
    if not runs:
        return usage1(name)
    return min(r[0] for r in runs), max(r[1] for r in runs)

def priceiv_numbers(name):
    out = json.load(open(os.path.join(work, name + ".out")))
    e = out["elasticities"][0] if "elasticities" in out else out["estimate"]["elasticities"][0]
    return out, e["own_price"], e["std_error"]

rows = [("priceiv estimate (CSV)", "priceiv"), ("reference: Python, numpy + pandas", "reference"),
        ("priceiv estimate --bootstrap 999", "bootstrap"), ("priceiv estimate (Parquet copy)", "parquet")]
if os.environ["LARGE"] == "1":
    rows.append(("priceiv estimate, about 10M rows", "large"))
t = {name: usage(name) for _, name in rows}
print()
print("| run (2M rows: faster wall time and larger peak memory of two) | wall time (s) | peak memory (MB) |")
print("| --- | ---: | ---: |")
for label, name in rows:
    print(f"| {label} | {t[name][0]:.2f} | {t[name][1]:.0f} |")
(pw, pm), (rw, rm) = t["priceiv"], t["reference"]
print()
print(f"priceiv vs reference: {rw / pw:.1f}x faster (target at least 3x), {pm / rm:.2f} of its peak memory (target at most 0.5)")
extra = t["bootstrap"][0] - pw
shown = f"{extra:.2f} s" if extra > 0.005 else "below the run-to-run noise"
print(f"999 cluster-bootstrap replicates after the fit: {shown} (target under 1 s; the run with --bootstrap 999 less the run without)")
if os.environ["LARGE"] == "1":
    print(f"about 10M rows end to end: {t['large'][0]:.2f} s (target under 8 s), {t['large'][1]:.0f} MB (target under 1500 MB)")

ref = json.load(open(os.path.join(work, "reference1.out")))
bad = []
print()
print("| quantity | priceiv | reference | relative difference |")
print("| --- | ---: | ---: | ---: |")
for name in ("priceiv1", "priceiv2", "parquet", "bootstrap1"):
    out, e, se = priceiv_numbers(name)
    if name == "priceiv1":
        if out.get("n") not in (None, ref["n"]):
            bad.append(f"n: priceiv {out.get('n')}, reference {ref['n']}")
    for what, a, b in (("elasticity", e, ref["elasticity"]), ("standard error", se, ref["std_error"])):
        rel = abs(a - b) / abs(b)
        if name == "priceiv1":
            print(f"| {what} | {a:.12g} | {b:.12g} | {rel:.1e} |")
        if not rel <= 1e-6:
            bad.append(f"{what} ({name}): priceiv {a!r}, reference {b!r}, relative difference {rel:.2e} > 1e-6")
if bad:
    print()
    print("!" * 72)
    print("DISAGREEMENT between priceiv and the reference pipeline:")
    for b in bad:
        print("  " + b)
    print("!" * 72)
    sys.exit(1)
print()
print("agreement: elasticity and standard error within 1e-6 relative (CSV, Parquet and the --bootstrap run)")
EOF
