"""Shared test fixtures."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from PIL import Image


def pytest_report_header(config):
    # The suite tests the installed package: CI installs it as the README
    # says, a developer with an editable install (DEVELOPERS.md).
    import quantize

    return f"quantize imported from {Path(quantize.__file__).parent}"


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
