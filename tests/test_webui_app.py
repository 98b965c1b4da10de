"""The dashboard's app factory and the safety of its web layer (CSRF, headers, uploads, assets)."""

from __future__ import annotations

import importlib.resources
import io
import json
import re

import pytest

import magvault
from magvault.paths import part

from browser.webui_data import csrf_token, filled_sqlite, text_of, thermomagnetic_csv

webui = part("webui")


@pytest.fixture
def app(db_url):
    application = webui.create_app(db_url, {"TESTING": True})
    yield application
    application.extensions["magvault"].close()


@pytest.fixture(scope="module")
def filled(tmp_path_factory):
    # Back-end independent checks share one SQLite vault; the crawl and the API run on every back-end.
    path, made = filled_sqlite(tmp_path_factory.mktemp("webui_app"))
    application = webui.create_app(path, {"TESTING": True})
    yield application, made
    application.extensions["magvault"].close()


def test_factory_opens_the_vault_once_and_keeps_it(app):
    first = app.extensions["magvault"]
    assert isinstance(first, magvault.Vault)
    client = app.test_client()
    assert client.get("/").status_code == 200
    assert client.get("/bench").status_code == 200
    assert app.extensions["magvault"] is first


def test_factory_refuses_a_missing_database(tmp_path):
    with pytest.raises(magvault.MagvaultError, match="no vault at"):
        webui.create_app(str(tmp_path / "absent.db"))


def test_secret_key_is_random_per_app_unless_configured(db_url, monkeypatch):
    monkeypatch.delenv("MAGVAULT_SECRET_KEY", raising=False)
    a, b = webui.create_app(db_url), webui.create_app(db_url)
    assert a.secret_key != b.secret_key and len(a.secret_key) >= 32
    monkeypatch.setenv("MAGVAULT_SECRET_KEY", "a-key-from-the-environment")
    c = webui.create_app(db_url)
    assert c.secret_key == "a-key-from-the-environment"
    for x in (a, b, c):
        x.extensions["magvault"].close()


def test_every_page_links_every_top_level_page(filled):
    app, _ = filled
    for url in ("/", "/bench", "/events", "/no-such-page"):
        page = app.test_client().get(url).get_data(as_text=True)
        nav = re.search(r'<nav aria-label="Main">(.*?)</nav>', page, re.S).group(1)
        assert re.findall(r'href="([^"]+)"', nav) == ["/", "/bench", "/events", "/api/"], url
        current = re.findall(r'href="([^"]+)"\s*aria-current="page"', nav)
        assert current == ([url] if url != "/no-such-page" else []), url


def _csp(response) -> dict[str, str]:
    return {d.split()[0]: d for d in (p.strip() for p in response.headers["Content-Security-Policy"].split(";"))}


def test_security_headers_and_a_strict_policy_on_plain_pages(filled):
    app, made = filled
    client = app.test_client()
    for url in ("/", "/bench", "/events", f"/specimen/{made.piece}", "/api/specimens", "/no-such-page"):
        r = client.get(url)
        csp = _csp(r)
        assert csp["script-src"] == "script-src 'self'", url
        assert csp["style-src"] == "style-src 'self'", url
        assert csp["frame-ancestors"] == "frame-ancestors 'none'"
        assert csp["object-src"] == "object-src 'none'"
        assert r.headers["X-Content-Type-Options"] == "nosniff"
        assert r.headers["X-Frame-Options"] == "DENY"


def test_eval_is_allowed_only_on_the_webgl_page(filled):
    app, made = filled
    client = app.test_client()
    run_page = client.get(f"/run/{made.thermo_run}")
    assert "'unsafe-eval'" not in _csp(run_page)["script-src"]
    assert {t["type"] for t in _traces(run_page)} == {"scatter"}
    full = client.get(f"/run/{made.thermo_run}/full")
    assert _csp(full)["script-src"] == "script-src 'self' 'unsafe-eval'"
    assert {t["type"] for t in _traces(full)} == {"scattergl"}


def _traces(response) -> list[dict]:
    blocks = re.findall(r'<script type="application/json" data-figure="[^"]+">(.*?)</script>',
                        response.get_data(as_text=True), re.S)
    assert blocks
    return [t for b in blocks for t in json.loads(b)["data"]]


def test_no_inline_scripts_and_nothing_from_the_network(filled):
    app, made = filled
    client = app.test_client()
    for url in ("/", "/bench", f"/specimen/{made.piece}", f"/run/{made.thermo_run}", "/events"):
        page = client.get(url).get_data(as_text=True)
        for tag in re.findall(r"<script\b[^>]*>", page):
            # Either a file from this server, or a data block the browser never executes.
            assert re.search(r'src="/', tag) or 'type="application/json"' in tag, (url, tag)
        assert not re.search(r'(src|href)="(https?:)?//', page), url
        assert "javascript:" not in page


def test_post_without_a_csrf_token_is_refused(filled):
    app, made = filled
    vault = app.extensions["magvault"]
    before = vault.counts()
    client = app.test_client()
    posts = [r for r in app.url_map.iter_rules() if "POST" in (r.methods or set())]
    assert len(posts) >= 8
    urls = {"/bench/specimen": {"code": "NEW-1"}, "/bench/piece": {"parent": made.root, "code": "NEW-2"},
            "/bench/run": {"specimen": made.piece, "kind": "hysteresis"},
            f"/run/{made.thermo_run}/retract": {"reason": "no token here"}}
    for rule in posts:
        url = rule.rule.replace("<path:code>", made.piece).replace(
            "<int(min=1, max=2147483647):run_id>", str(made.thermo_run))
        r = client.post(url, data=urls.get(url, {"x": "1"}))
        assert r.status_code == 400, url
        assert "security token is missing" in text_of(r.get_data(as_text=True)), url
    assert vault.counts() == before
    assert vault.run(made.thermo_run)["status"] == "recorded"


def test_post_with_the_token_is_accepted(filled):
    app, _ = filled
    client = app.test_client()
    token = csrf_token(client.get("/bench").get_data(as_text=True))
    r = client.post("/bench/specimen", data={"csrf_token": token, "code": "NEW-3", "mass": "5.0 mg"})
    assert r.status_code == 302 and r.headers["Location"].endswith("/specimen/NEW-3")


def test_an_upload_over_the_limit_is_refused_with_the_limit_named(db_url):
    app = webui.create_app(db_url, {"TESTING": True, "WTF_CSRF_ENABLED": False,
                                    "MAX_CONTENT_LENGTH": 64 * 1024})
    try:
        big = thermomagnetic_csv(n=20000)
        assert len(big) > 64 * 1024
        r = app.test_client().post("/bench/import", data={"file": (io.BytesIO(big), "big.csv"),
                                                          "specimen": "X", "kind": "thermomagnetic"},
                                   content_type="multipart/form-data")
        assert r.status_code == 413
        text = text_of(r.get_data(as_text=True))
        assert "larger than the limit of 64 kB" in text and "MAGVAULT_MAX_UPLOAD_MB" in text
    finally:
        app.extensions["magvault"].close()


def test_the_upload_limit_comes_from_the_environment(db_url, monkeypatch):
    monkeypatch.setenv("MAGVAULT_MAX_UPLOAD_MB", "2.5")
    app = webui.create_app(db_url)
    assert app.config["MAX_CONTENT_LENGTH"] == int(2.5 * 1024 * 1024)
    app.extensions["magvault"].close()
    monkeypatch.setenv("MAGVAULT_MAX_UPLOAD_MB", "lots")
    with pytest.raises(magvault.MagvaultError, match="MAGVAULT_MAX_UPLOAD_MB: expected a positive number"):
        webui.create_app(db_url)


def test_the_bench_tells_the_browser_the_upload_limit(filled):
    app, _ = filled
    page = app.test_client().get("/bench").get_data(as_text=True)
    limit = app.config["MAX_CONTENT_LENGTH"]
    assert f'data-max-bytes="{limit}"' in page
    assert f"Files up to {round(limit / 1048576)} MB" in page


def test_templates_escape_what_users_typed(filled):
    app, _ = filled
    vault = app.extensions["magvault"]
    vault.add_specimen("ESC-1", notes="<script>alert('x')</script> & <b>bold</b>", storage="<i>shelf</i>")
    page = app.test_client().get("/specimen/ESC-1").get_data(as_text=True)
    assert "<script>alert" not in page and "<b>bold</b>" not in page and "<i>shelf</i>" not in page
    assert "&lt;script&gt;alert(&#39;x&#39;)&lt;/script&gt; &amp; &lt;b&gt;bold&lt;/b&gt;" in page


def test_plotly_js_comes_from_the_installed_package_with_long_caching(filled):
    app, _ = filled
    client = app.test_client()
    assert "plotly" not in client.get("/").get_data(as_text=True)  # pages without figures do not load it
    import plotly

    expected = (importlib.resources.files("plotly") / "package_data" / "plotly.min.js").read_bytes()
    with client.get(f"/assets/plotly.min.js?v={plotly.__version__}") as r:
        assert r.status_code == 200 and r.data == expected
        assert r.mimetype == "text/javascript"
        assert "immutable" in r.headers["Cache-Control"] and "max-age=31536000" in r.headers["Cache-Control"]


def test_favicon_is_served(filled):
    app, _ = filled
    with app.test_client().get("/favicon.ico") as r:
        assert r.status_code == 200 and r.mimetype == "image/svg+xml" and b"<svg" in r.data


def test_serve_binds_locally_by_default_and_prints_the_address(db_url, monkeypatch, capsys):
    calls = {}

    class FakeServer:
        server_port = 5123

        def serve_forever(self):
            raise KeyboardInterrupt

        def server_close(self):
            calls["closed"] = True

    def fake_make_server(host, port, app, threaded):
        calls.update(host=host, port=port, threaded=threaded, app=app)
        return FakeServer()

    import werkzeug.serving

    monkeypatch.setattr(werkzeug.serving, "make_server", fake_make_server)
    webui.serve(db_url)
    out = capsys.readouterr().out
    assert calls["host"] == "127.0.0.1" and calls["port"] == 5000 and calls["threaded"] is True
    assert "http://127.0.0.1:5123/" in out and calls["closed"]
