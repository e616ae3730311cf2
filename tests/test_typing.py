"""The public API type-checks: mypy accepts a script that uses it as documented and reports each misuse.

Reference: mypy itself (the type checker the test extras install), on the package's
own annotations and its ``py.typed`` marker (PEP 561, "Distributing and Packaging
Type Information"). The scripts below are this project's own examples.
"""

import inspect
import os
import subprocess
import sys
import typing
from pathlib import Path

import pytest

import quantize

GOOD = '''
from pathlib import Path

import numpy as np

import quantize
from quantize import FitSettings, KMeansResult, MappedImage, Palette, Picture, Separation, Sweep

img = np.zeros((8, 8, 3), np.uint8)
pic: Picture = quantize.load_image(Path("in.png"), max_pixels=None)
pal: Palette = quantize.fit_palette(img, 4, settings=FitSettings(restarts=2))
pal2: Palette = quantize.fit_palette([img, "b.png"], (2, 8), max_pixels=10_000)
res: MappedImage = pal.apply(pic, dither="floyd-steinberg", nearest="space")
res2: MappedImage = quantize.map_picture(img, pal, dither="bayer4", nearest="auto")
km: KMeansResult = quantize.kmeans(np.random.default_rng(0).random((50, 3)), 3, init="random", seed=1)
sw: Sweep = quantize.sweep(img, (2, 6), progress=lambda k: None)
best: Palette = sw.chosen.palette
sep: Separation = quantize.separate(img, pal, dpi=300.0, tones="halftone", substrate="#ffffff")
files: dict = sep.write(Path("films"), force=True)
saved: Path = pal.save("p.json")
mean: float = res.delta_e["mean"]
loaded: Palette = Palette.load(Path("p.json"))
batch = quantize.run_batch("in", Path("out"), progress=lambda i, n, name: None)
failed: int = batch.failed
lab = quantize.to_space(img, "lab")
'''

# Each line marked "# misuse" must be reported, and nothing else.
BAD = '''
import numpy as np

import quantize

img = np.zeros((8, 8, 3), np.uint8)
pal = quantize.fit_palette(img, 4)
quantize.kmeans(img.reshape(-1, 3), "3")  # misuse: k is an int
quantize.load_image(42)  # misuse: a path
pal.apply(img, dither="zigzag")  # misuse: not a dither method
quantize.map_picture(img, pal, nearest="closest")  # misuse: not a nearest-colour rule
n: int = quantize.fit_palette(img, 4)  # misuse: returns a Palette
quantize.separate(img, "not a palette")  # misuse: a Palette
quantize.fit_palette(img, 4, settings="lab")  # misuse: a FitSettings
quantize.sweep(img, max_pixels="many")  # misuse: an int
quantize.kmeans(img.reshape(-1, 3), 3, init="best")  # misuse: not a seeding
quantize.run_batch(3, "out")  # misuse: a folder path
'''


def _mypy(tmp_path, name, text):
    """mypy on one script, reporting errors in the script only (the package is checked by `mypy quantize`)."""
    script = tmp_path / name
    script.write_text(text, encoding="utf-8")
    env = dict(os.environ)
    package_root = Path(quantize.__file__).resolve().parents[1]
    if package_root.name not in ("site-packages", "dist-packages"):
        # A source checkout (an editable install): mypy does not follow an editable install's import hook.
        env["MYPYPATH"] = str(package_root)
    # Run in tmp_path so that the checkout's own [tool.mypy] settings do not apply to the example.
    res = subprocess.run([sys.executable, "-m", "mypy", "--follow-imports=silent", "--no-error-summary",
                          "--show-error-codes", "--cache-dir", str(tmp_path / ".mypy_cache"), name],
                         cwd=tmp_path, env=env, capture_output=True, text=True)
    return res


def test_a_script_using_the_public_api_as_documented_type_checks(tmp_path):
    res = _mypy(tmp_path, "good.py", GOOD)
    assert res.returncode == 0, res.stdout + res.stderr
    assert "error" not in res.stdout


def test_each_misuse_of_the_public_api_is_reported(tmp_path):
    res = _mypy(tmp_path, "bad.py", BAD)
    assert res.returncode == 1, res.stdout + res.stderr
    expected = {i for i, line in enumerate(BAD.splitlines(), start=1) if "# misuse" in line}
    reported = {int(line.split(":")[1]) for line in res.stdout.splitlines() if line.startswith("bad.py:")
                and ": error:" in line}
    assert reported == expected, res.stdout


def test_the_names_a_type_checker_knows_are_the_names_the_code_accepts():
    from quantize.core import choices
    from quantize.fit.assign import METRICS
    from quantize.fit.clustering import INITS
    from quantize.render.dither import DITHERS
    from quantize.separation.dithered import DITHER_CHOICES
    from quantize.separation.tonal import TONES

    assert list(typing.get_args(choices.DitherName)) == list(DITHERS)
    assert set(typing.get_args(choices.NearestName)) == {"auto", *METRICS}
    assert list(typing.get_args(choices.SeedingName)) == list(INITS)
    params = inspect.signature(quantize.separate).parameters
    for name, accepted in (("dithered", DITHER_CHOICES), ("tones", TONES)):
        assert str(params[name].annotation) == f"Literal[{', '.join(map(repr, accepted))}] | None"


def _public_callables():
    for name in quantize.__all__:
        obj = getattr(quantize, name, None)
        if inspect.isfunction(obj):
            yield name, obj
        elif inspect.isclass(obj) and not issubclass(obj, BaseException):
            yield name, obj  # the constructor
            for attr, member in vars(obj).items():
                fn = member.__func__ if isinstance(member, (classmethod, staticmethod)) else member
                if inspect.isfunction(fn) and not attr.startswith("_"):
                    yield f"{name}.{attr}", fn


@pytest.mark.parametrize("name,fn", list(_public_callables()), ids=lambda x: x if isinstance(x, str) else "")
def test_every_public_parameter_is_annotated_and_none_is_any(name, fn):
    for p in inspect.signature(fn).parameters.values():
        if p.name in ("self", "cls"):
            continue
        if p.kind is p.VAR_KEYWORD:  # **options: the fields of a settings class, checked at run time
            continue
        assert p.annotation is not inspect.Parameter.empty, f"{name}: {p.name} has no annotation"
        assert "Any" not in str(p.annotation).replace("Any]", ""), f"{name}: {p.name} is {p.annotation}"
