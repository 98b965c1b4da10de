"""The local web dashboard (installed as ``magvault.webui``): a Flask app factory.

Views call :class:`magvault.Vault` only; they never touch SQL.
"""

from __future__ import annotations

from flask import Flask


def create_app(db: str | None = None, test_config: dict | None = None) -> Flask:
    app = Flask(__name__)
    app.config.update(MAGVAULT_DB=db)
    if test_config:
        app.config.update(test_config)
    return app
