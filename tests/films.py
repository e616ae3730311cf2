"""Reading back the films a separation wrote, as the shop receives them (for the film tests)."""

import numpy as np
from PIL import Image


def read_films(sep, folder):
    """Write ``sep``'s films (no PDF) into ``folder``; return ({film name: ink mask read from its TIFF}, written)."""
    written = sep.write(folder, stem="job", pdf=False)
    out = {}
    for p in sep.films():
        with Image.open(written["plates"][p.name][0]) as im:
            out[p.name] = ~np.asarray(im)
    return out, written
