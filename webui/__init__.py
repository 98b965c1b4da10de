"""The local web dashboard (installed as ``magvault.webui``): a Flask app factory.

Views call :class:`magvault.Vault` only; they never touch SQL.  One blueprint
per area: the collection, specimens, runs, the bench (logging and imports),
images, the audit log, the JSON API and the static assets (plotly.js is served
from the installed plotly package: the dashboard never touches the network),
and the pages that look across the collection: shifts, overlay, composition
map, coupled transitions and saved queries.

>>> from magvault.webui import create_app
>>> app = create_app("magvault.db")
"""

from __future__ import annotations

import os
import secrets
from typing import Any

from flask import Flask

__all__ = ["create_app", "serve", "DEFAULT_MAX_UPLOAD_MB"]

#: Largest accepted upload.  A 1,000,000-row export of four columns is about 50 MB.
DEFAULT_MAX_UPLOAD_MB = 200


def create_app(db: str, test_config: dict[str, Any] | None = None) -> Flask:
    """Build the dashboard for the vault at ``db`` (a SQLite path or SQLAlchemy URL).

    The vault is opened once per app (it is thread-safe: each call opens its own
    session) and kept on ``app.extensions["magvault"]``.  ``SECRET_KEY`` is random
    per process unless ``MAGVAULT_SECRET_KEY`` or ``test_config`` sets it, so a
    restart invalidates open forms rather than sharing a key on disk.
    """
    import magvault

    from . import errors, security
    from .staging import UploadStage
    from .thumbs import ThumbnailCache

    app = Flask(__name__)
    max_mb = _upload_limit_mb()
    app.config.from_mapping(
        MAGVAULT_VERSION=magvault.__version__,
        SECRET_KEY=os.environ.get("MAGVAULT_SECRET_KEY") or secrets.token_hex(32),
        MAX_CONTENT_LENGTH=int(max_mb * 1024 * 1024),
        # Forms stay open for a whole measurement session at the bench.
        WTF_CSRF_TIME_LIMIT=12 * 3600,
        SESSION_COOKIE_SAMESITE="Lax",
        SESSION_COOKIE_HTTPONLY=True,
        # Points per curve above which plots are decimated (LTTB, Steinarsson 2013).
        MAGVAULT_PLOT_POINTS=1500,
        # Rows per page of the collection and of the audit log.
        MAGVAULT_PAGE_SIZE=100,
        MAGVAULT_THUMB_CACHE_BYTES=64 * 1024 * 1024,
        MAGVAULT_STAGE_BYTES=4 * int(max_mb * 1024 * 1024),
        MAGVAULT_STAGE_SECONDS=3 * 3600,
    )
    if test_config:
        app.config.update(test_config)
    app.config["MAGVAULT_DB"] = str(db)

    vault = magvault.open(db)
    app.extensions["magvault"] = vault
    app.extensions["magvault.stage"] = UploadStage(app.config["MAGVAULT_STAGE_BYTES"],
                                                   app.config["MAGVAULT_STAGE_SECONDS"])
    app.extensions["magvault.thumbs"] = ThumbnailCache(app.config["MAGVAULT_THUMB_CACHE_BYTES"])

    security.init_app(app)
    errors.init_app(app)
    from . import formatting

    formatting.init_app(app)

    from .views import api, assets, bench, collection, events, images, runs, specimens
    from .views import coupled, loop_ratios, overlay, phase_map, saved, shifts

    for module in (collection, specimens, runs, bench, images, events, api, assets,
                   shifts, overlay, phase_map, coupled, loop_ratios, saved):
        app.register_blueprint(module.bp)
    return app


def _upload_limit_mb() -> float:
    from magvault.errors import InvalidValue

    text = os.environ.get("MAGVAULT_MAX_UPLOAD_MB")
    if not text:
        return float(DEFAULT_MAX_UPLOAD_MB)
    try:
        value = float(text)
    except ValueError:
        value = -1.0
    if not value > 0:
        raise InvalidValue(f"MAGVAULT_MAX_UPLOAD_MB: expected a positive number of megabytes, got {text!r}",
                           field="MAGVAULT_MAX_UPLOAD_MB")
    return value


def serve(db: str, host: str = "127.0.0.1", port: int = 5000) -> None:
    """Serve the dashboard with werkzeug (threaded) and print its address.

    Binds 127.0.0.1 unless told otherwise: the dashboard has no accounts, so it
    is meant for the machine it runs on.
    """
    from werkzeug.serving import make_server

    app = create_app(db)
    server = make_server(host, port, app, threaded=True)
    shown = f"[{host}]" if ":" in host else host
    print(f"magvault dashboard for {db}: http://{shown}:{server.server_port}/  (Ctrl+C stops it)", flush=True)
    if host not in ("127.0.0.1", "localhost", "::1"):
        print("note: the dashboard has no log-in; anyone who can reach this address can change the vault",
              flush=True)
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
        app.extensions["magvault"].close()
