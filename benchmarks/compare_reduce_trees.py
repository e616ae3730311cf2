"""Two or more checkouts side by side: whole ``quantize reduce`` processes, as a user runs them.

Each checkout runs the same command on the same files in fresh processes,
alternating checkouts, so a change in the machine's load hits all alike;
the table gives medians of CPU seconds (the process and its threads, from
the kernel's accounting of the child) and wall seconds, and whether every
checkout wrote the same image.  The files are bench_everyday's photos and
artwork (made by ``bench_everyday.py`` into ``--images``).

    python benchmarks/compare_reduce_trees.py OLD_CHECKOUT:NEW_CHECKOUT [--repeats 3] [--images DIR] [-- REDUCE_ARGS]

With no REDUCE_ARGS the command is ``reduce FILE -o OUT --force`` (no
``-k``: the default a user gets).
"""
import argparse
import hashlib
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

RUN = "import sys; sys.path.insert(0, sys.argv.pop(1)); sys.argv[0] = 'quantize'; " \
      "from quantize.cli.entry import run; run()"


def timed(argv) -> tuple[float, float]:
    """(CPU seconds of the child and its threads, wall seconds) of one process."""
    before = os.times()
    t = time.perf_counter()
    r = subprocess.run(argv, capture_output=True, text=True, cwd="/tmp")
    wall = time.perf_counter() - t
    after = os.times()
    if r.returncode:
        sys.exit(f"{' '.join(argv)} failed:\n{r.stderr[-2000:]}")
    return after.children_user + after.children_system - before.children_user - before.children_system, wall


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()[:12]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("trees")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--images", default="bench-out/everyday", help="folder of bench_everyday's images")
    ap.add_argument("--files", default="photo-0.3mp.jpg,photo-1mp.jpg,photo-12mp.jpg,artwork-1mp.png")
    ap.add_argument("--out", default="bench-out/reduce-trees")
    ap.add_argument("rest", nargs="*", help="extra reduce arguments, after --")
    args = ap.parse_args()
    trees = args.trees.split(":")
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    print(f"# quantize reduce {' '.join(args.rest) or '(no -k)'}, medians of {args.repeats} fresh processes per "
          f"checkout, alternating; {time.strftime('%Y-%m-%d %H:%M')}, load average before "
          f"{os.getloadavg()[0]:.2f}\n")
    print("| file | " + " | ".join(f"{Path(t).name} CPU s | wall s" for t in trees) + " | same image |")
    print("|---|" + "---|---|" * len(trees) + "---|")
    for i, t in enumerate(trees):  # a first run may compile numba's cache for the checkout; not timed
        timed([sys.executable, "-c", RUN, t, "reduce", str(Path(args.images) / args.files.split(",")[0]), "-o",
               str(out / f"warm-{i}.png"), "--force", "-k", "4"])
    for name in args.files.split(","):
        src = Path(args.images) / name
        times: dict[str, list] = {t: [] for t in trees}
        for _ in range(args.repeats):
            for i, t in enumerate(trees):
                dst = out / f"{i}-{src.stem}.png"
                times[t].append(timed([sys.executable, "-c", RUN, t, "reduce", str(src), "-o", str(dst), "--force",
                                       *args.rest]))
        same = len({digest(out / f"{i}-{src.stem}.png") for i in range(len(trees))}) == 1
        cells = [f"{statistics.median(c for c, _ in times[t]):.2f} | {statistics.median(w for _, w in times[t]):.2f}"
                 for t in trees]
        print(f"| {name} | " + " | ".join(cells) + f" | {'yes' if same else 'no'} |", flush=True)
    print(f"\nLoad average at the end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
