"""Browser tests: Debian's Chromium driven by Playwright (never a browser download).

Without /usr/bin/chromium the browser tests are skipped with the reason in the
summary, except under CI=true, where a missing browser fails them.  The
dashboard runs in a thread (werkzeug's threaded server on a free port) on a
SQLite vault of invented data; screenshots go to test-artifacts/ (git-ignored).
"""

from __future__ import annotations

import os
import shutil
import threading
from pathlib import Path

import pytest

CHROMIUM_PATH = os.environ.get("MAGVAULT_CHROMIUM", "/usr/bin/chromium")
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run"]



def _chromium_missing() -> str | None:
    if not (os.path.isfile(CHROMIUM_PATH) and os.access(CHROMIUM_PATH, os.X_OK)) and not shutil.which(CHROMIUM_PATH):
        return f"no Chromium at {CHROMIUM_PATH} (install Debian's chromium package, or set MAGVAULT_CHROMIUM)"
    return None


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    reason = _chromium_missing()
    if reason:
        if os.environ.get("CI") == "true":
            pytest.fail(f"CI=true and the browser tests cannot run: {reason}")
        pytest.skip(reason)
    return {**browser_type_launch_args, "executable_path": CHROMIUM_PATH, "args": CHROMIUM_ARGS}


@pytest.fixture(scope="session")
def artifacts(pytestconfig) -> Path:
    folder = Path(pytestconfig.rootpath) / "test-artifacts"
    folder.mkdir(exist_ok=True)
    return folder


@pytest.fixture(scope="module")
def live(tmp_path_factory):
    """The dashboard on a free local port, over a small invented collection: (base URL, what was made, app)."""
    from werkzeug.serving import make_server

    from magvault.paths import part
    from webui_data import filled_sqlite

    path, made = filled_sqlite(tmp_path_factory.mktemp("browser"))
    app = part("webui").create_app(path)
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_port}", made, app
    server.shutdown()
    thread.join(timeout=10)
    server.server_close()
    app.extensions["magvault"].close()


class PageProblems:
    """Console errors, uncaught exceptions and failed requests seen by a page."""

    def __init__(self, page):
        self.items: list[str] = []
        page.on("console", lambda m: self.items.append(f"console {m.type}: {m.text}") if m.type == "error" else None)
        page.on("pageerror", lambda e: self.items.append(f"page error: {e}"))
        page.on("requestfailed", lambda r: self.items.append(f"request failed: {r.url} {r.failure}"))

    def take(self) -> list[str]:
        out, self.items = self.items, []
        return out


@pytest.fixture
def tablet(browser):
    """A 768 x 1024 page (a tablet at the instrument), with its problems recorded."""
    context = browser.new_context(viewport={"width": 768, "height": 1024})
    page = context.new_page()
    page.problems = PageProblems(page)
    yield page
    context.close()


@pytest.fixture
def desk(browser):
    """A 1280 x 800 page (a desk screen), with its problems recorded."""
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    page = context.new_page()
    page.problems = PageProblems(page)
    yield page
    context.close()


def _serve(path: str):
    """Start the dashboard for the vault at ``path`` on a free port; returns (base URL, app, stop)."""
    from werkzeug.serving import make_server

    from magvault.paths import part

    app = part("webui").create_app(path)
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()

    def stop():
        server.shutdown()
        thread.join(timeout=10)
        server.server_close()
        app.extensions["magvault"].close()

    return f"http://127.0.0.1:{server.server_port}", app, stop


@pytest.fixture(scope="session")
def demo_build(tmp_path_factory):
    """The invented demo (``magvault demo``), built once per test session: (database path, its manifest)."""
    import json

    from magvault.demo import build

    summary = build(tmp_path_factory.mktemp("demo"))
    return str(summary.database), json.loads(summary.manifest.read_text())


@pytest.fixture(scope="module")
def demo_live(demo_build):
    """The dashboard over the demo: (base URL, manifest, app)."""
    path, manifest = demo_build
    base, app, stop = _serve(path)
    yield base, manifest, app
    stop()


@pytest.fixture(scope="module")
def many_live(tmp_path_factory):
    """The dashboard over 200 demo-sized low-temperature runs: (base URL, run ids, app)."""
    from webui_data import many_curves_sqlite

    path, ids = many_curves_sqlite(tmp_path_factory.mktemp("many"))
    base, app, stop = _serve(path)
    yield base, ids, app
    stop()
