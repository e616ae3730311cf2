"""The library leaves the caller's process alone: numpy's print options, warning filters, the collector.

Each public call runs in a fresh interpreter (a test process has long since
imported colour-science, whose import switches numpy to 1.13-style
printing), and the state is compared before and after every call.
"""

import subprocess
import sys
import textwrap

SCRIPT = textwrap.dedent('''
    import gc, json, sys, warnings
    import numpy as np

    def state():
        return (repr(sorted(np.get_printoptions().items())), repr(warnings.filters), gc.isenabled(),
                repr(np.geterr()))

    changed = []
    # Some third-party modules add warning filters of their own when first imported; import them first,
    # so that what is checked below is what the library does.
    import scipy.ndimage, scipy.optimize, skimage.measure, skimage.morphology  # noqa: E401

    def check(name, fn):
        before = state()
        fn()
        if state() != before:
            changed.append(name)

    img = np.zeros((48, 64, 3), np.uint8)
    img[:, 20:40] = (200, 30, 40)
    img[10:30, 45:60] = (30, 60, 160)
    img[:, :20] = (245, 240, 230)
    check("import quantize", lambda: __import__("quantize"))
    import quantize
    from quantize.colour.adaptation import adapt_lab
    from quantize.colour.spaces import srgb_to_cam16ucs, srgb_to_oklab
    from quantize.separation.plates import separate

    pal = {}
    check("fit_palette", lambda: pal.setdefault("p", quantize.fit_palette(img, 3, restarts=1)))
    check("fit_palette lab space", lambda: quantize.fit_palette(img, 3, restarts=1, space="cam16ucs"))
    check("sweep", lambda: quantize.sweep(img, (2, 4), restarts=1))
    check("kmeans", lambda: quantize.kmeans(np.random.default_rng(0).random((200, 3)), 3))
    check("apply", lambda: pal["p"].apply(img))
    check("apply dithered", lambda: pal["p"].apply(img, dither="floyd-steinberg"))
    check("adapt_lab", lambda: adapt_lab([[50.0, 10.0, 10.0]], illuminant="D50"))
    check("cam16ucs", lambda: srgb_to_cam16ucs(np.array([[0.2, 0.4, 0.6]])))
    check("oklab", lambda: srgb_to_oklab(np.array([[0.2, 0.4, 0.6]])))
    inks = quantize.fit_palette(img, 3, restarts=1, locked=["#f5f0e6"])
    check("separate", lambda: separate(img, inks, dpi=300))
    check("separate halftone", lambda: separate(img, inks, dpi=300, tones="halftone"))
    print(json.dumps(changed))
''')


def test_no_public_call_changes_process_wide_state():
    res = subprocess.run([sys.executable, "-c", SCRIPT], capture_output=True, text=True, timeout=600)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip().splitlines()[-1] == "[]", res.stdout
