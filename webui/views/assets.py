"""Files the pages need: plotly.js from the installed plotly package (no CDN, no network) and the icon."""

from __future__ import annotations

import importlib.resources
from functools import lru_cache
from pathlib import Path

import plotly
from flask import Blueprint, current_app, request, send_file, url_for

bp = Blueprint("assets", __name__)

YEAR = 365 * 24 * 3600


@lru_cache(maxsize=1)
def plotly_js_path() -> Path:
    """plotly.min.js inside the installed plotly package (a real file in a normal install)."""
    resource = importlib.resources.files("plotly") / "package_data" / "plotly.min.js"
    with importlib.resources.as_file(resource) as path:
        return Path(path)


def plotly_js_url() -> str:
    # The version in the URL lets the browser keep the file for a year and still see an upgrade.
    return url_for("assets.plotly_js", v=plotly.__version__)


@bp.get("/assets/plotly.min.js")
def plotly_js():
    response = send_file(plotly_js_path(), mimetype="text/javascript", max_age=YEAR, conditional=True)
    if request.args.get("v") == plotly.__version__:
        response.headers["Cache-Control"] = f"public, max-age={YEAR}, immutable"
    return response


@bp.get("/favicon.ico")
def favicon():
    path = Path(current_app.static_folder) / "icon.svg"
    return send_file(path, mimetype="image/svg+xml", max_age=7 * 24 * 3600)


@bp.app_context_processor
def _asset_urls():
    return {"plotly_js_url": plotly_js_url}


