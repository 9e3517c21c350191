#!/usr/bin/env bash
# The speed targets that need a many-core machine, as one prepared run.
#
#   bash benchmarks/multicore_rows.sh OUTDIR [THREADS] [STEPS]
#
# THREADS: thread counts for the rows [1,2,4,8,16]; STEPS: which steps to run, comma
# separated, of rows,field2048,textbook,cube [all].  Every step writes its log and JSON
# into OUTDIR and has its own time limit, so one slow step leaves the others' figures.
# Wheels in .whl/ (for a machine that reaches no package index) are installed first into
# a private folder.  Reproduces the 16-core table of the accelerated-engine issue; on a
# 2-core machine use THREADS=1,2.
set -u
out=${1:-multicore-out}
threads=${2:-1,2,4,8,16}
steps=${3:-rows,field2048,textbook,cube}
py=${PYTHON:-python3}
mkdir -p "$out"
export PYTHONUNBUFFERED=1
export NUMBA_CACHE_DIR=${NUMBA_CACHE_DIR:-/tmp/skyscale-numba-cache}
if [ -d .whl ] && ls .whl/*.whl >/dev/null 2>&1; then
    $py -m pip install -q --no-index --no-deps --no-compile --no-cache-dir --upgrade \
        --target /tmp/skyscale-site .whl/*.whl || exit 1
    export PYTHONPATH=/tmp/skyscale-site
fi
export PYTHONPATH=engine${PYTHONPATH:+:$PYTHONPATH}
top=${threads##*,}

{
    date -u
    nproc
    lscpu | grep -E "Model name|^CPU\(s\)|Thread|Core|Socket|MHz" || true
    $py -c "import sys, numpy, numba, scipy, astropy; print(sys.version.split()[0], 'numpy', numpy.__version__, 'numba', numba.__version__, 'scipy', scipy.__version__, 'astropy', astropy.__version__)"
    t0=$(date +%s)
    $py -c "from skyscale.core.warmup import warm_up; warm_up()" && echo "compile (warm_up): $(( $(date +%s) - t0 )) s"
} 2>&1 | tee "$out/machine.txt"

step() {   # name, limit in seconds, command...
    local name=$1 limit=$2
    shift 2
    case ",$steps," in *",$name,"*) ;; *) return ;; esac
    echo "== $name (limit ${limit} s)"
    timeout "$limit" "$@" 2>&1 | tee "$out/$name.log"
}

step rows 200 $py benchmarks/speed_targets.py --rows field1024,update,plane256,compact \
    --threads "$threads" --out "$out/rows.json"
step field2048 200 $py benchmarks/speed_targets.py --rows field2048 --threads "1,$top" \
    --out "$out/field2048.json"
step textbook 120 $py benchmarks/depth_vs_textbook.py --sizes 1024 --threads "$top" \
    --out "$out/textbook.json"
step cube 150 $py benchmarks/cube_throughput.py --planes 48 --repeat 1 --out "$out/cube.json"
echo "done $(date -u)"
