"""Everything a browser loads comes from this server: no CDN, no other host (runs offline)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from server.pages.assets import PLOTTING_BUNDLE, static_url

REPO = Path(__file__).resolve().parents[1]

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


def test_the_plotting_library_is_the_vendored_partial_bundle_with_every_trace_type_we_draw(client):
    """The pages draw scatter and bar traces only (server/pages/plots.py, web/static/soa_entry.js); the partial
    bundle registers those, and holds no eval (the content security policy allows none)."""
    r = client.get(static_url(PLOTTING_BUNDLE))
    assert r.status_code == 200 and r.headers["content-type"].startswith("application/javascript")
    script = r.content.decode()
    assert "plotly.js (basic - minified) v4.1.1" in script[:300]
    assert 1_000_000 < len(r.content) < 2_000_000
    assert "eval(" not in script and "new Function" not in script
    drawn = set(re.findall(r'"type": "(scatter|bar|pie|heatmap|contour|histogram|box|violin|scattergl|surface)"',
                           (REPO / "server/pages/plots.py").read_text()))
    drawn |= set(re.findall(r'type: "(\w+)", mode', (REPO / "web/static/soa_entry.js").read_text()))
    assert drawn == {"scatter", "bar"}


def test_pages_name_the_plotting_script_by_its_content(app, client, people, session_factory):
    from tests.pages.helpers import log_in, seed_board

    ids = seed_board(session_factory, analysed=1, unanalysed=0)
    log_in(client, app, people.ids["viewer"])
    page = client.get(f"/rails/{ids['rail_ids'][0]}")
    assert static_url(PLOTTING_BUNDLE) in page.text and "plotly.min.js" not in page.text
    assert static_url("plots.js") in page.text and static_url("railsign.css") in page.text
