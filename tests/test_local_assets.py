"""Everything a browser loads comes from this server: no CDN, no other host (runs offline)."""

from __future__ import annotations

import re

import pytest

ASSET = re.compile(r"""(?:src|href)\s*=\s*["']([^"']+)["']|url:\s*["']([^"']+)["']""")


@pytest.mark.parametrize("path", ["/docs", "/login"])
def test_pages_reference_only_local_assets(client, path):
    r = client.get(path)
    assert r.status_code == 200
    refs = [a or b for a, b in ASSET.findall(r.text)]
    assert refs, "the page references no assets at all: the pattern is wrong"
    for ref in refs:
        assert ref.startswith(("/", "#", "data:")), f"{path} loads {ref} from elsewhere"
    for ref in refs:
        if ref.startswith("/static/"):
            assert client.get(ref).status_code == 200, ref


def test_plotting_library_is_served_from_the_installed_package(client):
    r = client.get("/static/vendor/plotly.min.js")
    assert r.status_code == 200 and r.headers["content-type"].startswith("application/javascript")
    assert len(r.content) > 1_000_000
