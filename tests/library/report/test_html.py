"""The HTML report is one self-contained file that a browser renders with its images."""

from __future__ import annotations

import io
import re

import numpy as np
import pytest
from PIL import Image

from kinetome.library.report.html import Report, image_html, table_html
from tests.browser import chromium_path, render_page


def _png(colour: tuple[int, int, int]) -> bytes:
    img = Image.new("RGB", (60, 40), colour)
    buf = io.BytesIO()
    img.save(buf, format="PNG")
    return buf.getvalue()


def _report() -> Report:
    r = Report(title="t", caution="simulation is not a safety case")
    r.section("one", "One").text("a < b & c").add(table_html([{"v": "composes"}], [("v", "Verdict")], classes={"v": "verdict"}))
    r.section("two", "Two").add(image_html(_png((200, 30, 30)), "red"))
    return r


def test_self_contained_and_escaped(tmp_path) -> None:
    html = _report().write(tmp_path / "r.html").read_text()
    assert "<script" not in html and "http://" not in html and "https://" not in html
    assert "a &lt; b &amp; c" in html
    assert 'class="verdict-composes"' in html
    assert re.search(r'src="data:image/png;base64,[A-Za-z0-9+/=]+"', html)


def test_image_must_be_png() -> None:
    with pytest.raises(ValueError, match="must be PNG"):
        image_html(b"GIF89a...", "x")


@pytest.mark.skipif(chromium_path() is None, reason="Chromium is not installed (apt-get install chromium chromium-driver)")
def test_chromium_renders_sections_and_images(tmp_path) -> None:
    page = _report().write(tmp_path / "r.html")
    dom, shot = render_page(page, width=800, height=600)
    assert 'id="one"' in dom and 'id="two"' in dom and "data:image/png" in dom
    pixels = np.asarray(Image.open(shot).convert("RGB"))
    red = (pixels[..., 0] > 150) & (pixels[..., 1] < 80) & (pixels[..., 2] < 80)
    assert red.sum() > 500  # the embedded image was decoded and painted
