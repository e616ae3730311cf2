"""Two checkouts side by side: CPU and wall seconds of a cold 2..16 sweep of bench_sweep's 12 MP photo.

Each checkout runs in fresh processes, alternating, so a change in the
machine's load hits both alike; CPU seconds (all threads) move less with the
load than wall seconds.  Either layout of the package is accepted (the
stage packages, or the flat modules of the first three sessions).  Three
sweeps per process: with the refinements as ``reduce`` runs them; the same
with one k-medians start per size (both trees start palettes of up to 8
colours from up to three: this row shows how much of a difference lies
there); and with no refinement (k-means only).  A warm-up loads whatever each tree loads on
first use, so neither pays for it in the timed sweeps.

    python benchmarks/compare_sweep_trees.py OLD_CHECKOUT:NEW_CHECKOUT [REPEATS]

e.g. ``git worktree add --detach ../old 58facee`` for the third session's code.
"""
import subprocess, sys, statistics
CODE = r'''
import sys, time, warnings
tree = sys.argv[1]
sys.path.insert(0, tree); sys.path.insert(0, tree + "/benchmarks")
warnings.simplefilter("ignore")
import quantize
assert quantize.__file__.startswith(tree)
from bench_sweep import photo_12mp
try:
    from quantize.core.sampling import sample_picture
    from quantize.fit.sweep import sweep_sample
    from quantize.io.read import as_picture
except ImportError:
    from quantize.images import as_picture
    from quantize.sampling import sample_picture
    from quantize.sweep import sweep_sample
smp = sample_picture(as_picture(photo_12mp())); smp.points("lab"); smp.binned("lab")
# Warm-up up to 16 colours: whatever each tree loads on first use (its
# compiled loops) is loaded before the timed sweeps, in both trees alike.
sweep_sample(smp, [2, 3, 16], restarts=1)
try:
    from quantize.fit import engine
except ImportError:
    from quantize import fitting as engine
out = []
for refine, starts in (("robust", None), ("robust", 0), ("none", None)):
    if starts is not None:
        # One k-medians start per size (the others are skipped), in both trees.
        saved, engine.SECOND_START_K = engine.SECOND_START_K, starts
    c = time.process_time(); w = time.perf_counter()
    sweep_sample(smp, list(range(2, 17)), restarts=8, refine=refine, warm=False)
    out += [time.process_time() - c, time.perf_counter() - w]
    if starts is not None:
        engine.SECOND_START_K = saved
print(*out)
'''
trees = sys.argv[1].split(":"); reps = int(sys.argv[2]) if len(sys.argv) > 2 else 2
res = {t: [] for t in trees}
for _ in range(reps):
    for t in trees:
        r = subprocess.run([sys.executable, "-c", CODE, t], capture_output=True, text=True, cwd="/tmp")
        if r.returncode: print(r.stderr[-2000:]); sys.exit(1)
        res[t].append([float(x) for x in r.stdout.split()])
print("CPU and wall seconds, medians; 'one start': the k-medians from one palette per size")
for t in trees:
    m = [statistics.median(r[i] for r in res[t]) for i in range(6)]
    print(f"{t:14s} robust cpu {m[0]:.2f} wall {m[1]:.2f} | robust, one start cpu {m[2]:.2f} wall {m[3]:.2f}"
          f" | none cpu {m[4]:.2f} wall {m[5]:.2f}")
