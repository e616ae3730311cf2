"""Shared test fixtures."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

# The tests import the package from the checkout, installed or not.
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


@pytest.fixture
def tmp_image_factory(tmp_path):
    """``make(name, image_or_array, **pillow_save_options) -> Path`` writes a file in tmp_path."""

    def make(name: str, image, **options) -> Path:
        path = tmp_path / name
        if not isinstance(image, Image.Image):
            image = Image.fromarray(np.asarray(image))
        image.save(path, **options)
        return path

    return make
