"""The service sheet's pages rendered to PNG with pdftoppm (poppler-utils), as
a person would see them.  The images are kept under
var/test-artifacts/service-sheet/ to look at."""

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from django.conf import settings
from PIL import Image

from reports.services import sheet_pdf

from .factories import TODAY
from .pdftext import page_texts

ARTIFACTS = Path(settings.VAR_DIR) / "test-artifacts" / "service-sheet"


def render(data, stem, dpi=60):
    if not shutil.which("pdftoppm"):
        message = "pdftoppm (poppler-utils) is not installed"
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(message + " (CI must provide it)")
        pytest.skip(message)
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    for old in ARTIFACTS.glob(f"{stem}-*.png"):
        old.unlink()
    pdf = ARTIFACTS / f"{stem}.pdf"
    pdf.write_bytes(data)
    subprocess.run(["pdftoppm", "-r", str(dpi), "-png", str(pdf), str(ARTIFACTS / stem)], check=True, timeout=120)
    return sorted(ARTIFACTS.glob(f"{stem}-*.png"), key=lambda p: int(p.stem.rsplit("-", 1)[1]))


def ink_share(image, *, near=None, tolerance=40):
    """Share of pixels that are not white, or (``near``) close to a colour."""
    rgb = np.asarray(image.convert("RGB"), dtype=int).reshape(-1, 3)
    if near is None:
        return float(np.mean(rgb.sum(axis=1) < 600))
    return float(np.mean(np.all(np.abs(rgb - np.array(near)) <= tolerance, axis=1)))


def test_every_page_renders_with_the_safety_box_on_the_first(bench_unit):
    _, data = sheet_pdf(asset_tag="FT-0120", today=TODAY)
    pages = render(data, "FT-0120")
    assert len(pages) == len(page_texts(data))
    for path in pages:
        with Image.open(path) as im:
            assert im.width > im.height, "landscape A4"
            assert ink_share(im) > 0.01, f"{path.name} is blank"
    with Image.open(pages[0]) as first, Image.open(pages[1]) as second:
        red = (0xA1, 0x1D, 0x1D)  # the safety box's frame and heading
        assert ink_share(first, near=red) > 0.001
        assert ink_share(second, near=red) < ink_share(first, near=red) / 4
