"""Two checkouts side by side: CPU and wall seconds of a cold 2..16 sweep of bench_sweep's 12 MP photo.

Each checkout runs in fresh processes, alternating, so a change in the
machine's load hits both alike; CPU seconds (all threads) move less with the
load than wall seconds.  Either layout of the package is accepted (the
stage packages, or the flat modules of the first three sessions).

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
sweep_sample(smp, [2, 3], restarts=1)
out = []
for refine in ("robust", "none"):
    c = time.process_time(); w = time.perf_counter()
    sweep_sample(smp, list(range(2, 17)), restarts=8, refine=refine, warm=False)
    out += [time.process_time() - c, time.perf_counter() - w]
print(*out)
'''
trees = sys.argv[1].split(":"); reps = int(sys.argv[2]) if len(sys.argv) > 2 else 2
res = {t: [] for t in trees}
for _ in range(reps):
    for t in trees:
        r = subprocess.run([sys.executable, "-c", CODE, t], capture_output=True, text=True, cwd="/tmp")
        if r.returncode: print(r.stderr[-2000:]); sys.exit(1)
        res[t].append([float(x) for x in r.stdout.split()])
for t in trees:
    m = [statistics.median(r[i] for r in res[t]) for i in range(4)]
    print(f"{t:14s} robust cpu {m[0]:.2f} wall {m[1]:.2f} | none cpu {m[2]:.2f} wall {m[3]:.2f}")
