"""The workbook's icons come from this machine (issue 15 item 12); the browser test
tests/browser/test_offline_screens.py checks a real page with request interception."""

from __future__ import annotations

import re

from studykit.app import local_assets


def test_the_icon_font_is_installed_with_its_files():
    folder = local_assets.fontawesome_dir()
    assert folder is not None, "fontawesome-free is a dependency (pyproject.toml)"
    css = (folder / "css" / "all.min.css").read_text(encoding="utf-8")
    fonts = set(re.findall(r"url\(\.\./webfonts/([^)?#]+)", css))
    assert fonts and all((folder / "webfonts" / f).is_file() for f in fonts)
    # the style sheet fetches nothing from elsewhere
    assert not re.search(r"url\((['\"]?)(https?:)?//", css)
    assert (folder / "css" / "v4-shims.min.css").is_file()


def test_remote_links_are_rewritten_to_the_server():
    page = (
        '<link href="https://cdn.example.org/npm/@fortawesome/fontawesome-free@^5/css/'
        'all.min.css"/><link href="https://cdn.example.org/npm/@fortawesome/'
        'fontawesome-free@^5/css/v4-shims.min.css"/><link href="/static/x.css"/>'
    )
    out = local_assets.localise_links(page, "/base/")
    assert out.count('href="/base/studykit/fontawesome/5/css/') == 2
    assert "example.org" not in out and 'href="/static/x.css"' in out


def test_only_style_sheets_and_fonts_are_served(tmp_path):
    import pytest
    import tornado.web

    handler = local_assets.FontAwesomeHandler.__new__(local_assets.FontAwesomeHandler)
    root = str(local_assets.fontawesome_dir())
    for bad in (
        "LICENSE.txt",
        "js-packages/@fortawesome/fontawesome-free/css/all.min.css",
        "css/../LICENSE.txt",
    ):
        with pytest.raises(tornado.web.HTTPError):
            handler.validate_absolute_path(root, f"{root}/{bad}")
