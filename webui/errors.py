"""Errors a user can act on: a page (or JSON under /api/) with a 4xx status, never a traceback."""

from __future__ import annotations

from flask import Flask, jsonify, render_template, request
from flask_wtf.csrf import CSRFError
from werkzeug.exceptions import HTTPException, RequestEntityTooLarge

from magvault.errors import MagvaultError, NotFound


def status_of(exc: MagvaultError) -> int:
    return 404 if isinstance(exc, NotFound) else 400


def _wants_json() -> bool:
    return request.path.startswith("/api/")


def error_response(status: int, title: str, message: str, field: str | None = None):
    if _wants_json():
        response = jsonify({"error": message, "field": field, "status": status})
        response.status_code = status
        return response
    return render_template("error.html", status=status, title=title, message=message), status


def size_text(n_bytes: int) -> str:
    return f"{n_bytes / 1048576:.0f} MB" if n_bytes >= 1048576 else f"{n_bytes / 1024:.0f} kB"


def upload_limit_text(max_bytes: int | None) -> str:
    if not max_bytes:
        return "the upload is larger than this server accepts"
    return (f"file: the upload is larger than the limit of {size_text(max_bytes)}; split the export, "
            "or ask whoever runs the dashboard to raise MAGVAULT_MAX_UPLOAD_MB")


def init_app(app: Flask) -> None:
    @app.errorhandler(MagvaultError)
    def _magvault(exc: MagvaultError):
        from .forms import for_the_page

        status = status_of(exc)
        message = exc.message if _wants_json() else for_the_page(exc.message)
        return error_response(status, "Not found" if status == 404 else "Cannot do that", message, exc.field)

    @app.errorhandler(CSRFError)
    def _csrf(exc: CSRFError):
        return error_response(400, "Form expired or incomplete",
                              f"The form's security token is missing or has expired ({exc.description}). "
                              "Nothing was changed: go back, reload the page and submit it again.")

    @app.errorhandler(RequestEntityTooLarge)
    def _too_large(exc):
        return error_response(413, "File too large", upload_limit_text(app.config.get("MAX_CONTENT_LENGTH")),
                              "file")

    @app.errorhandler(HTTPException)
    def _http(exc: HTTPException):
        titles = {404: "Not found", 405: "Not allowed here", 400: "Bad request"}
        message = exc.description or exc.name
        if exc.code == 404:
            message = (f"nothing at {request.path}; the navigation bar above leads to every page"
                       if not _wants_json() else f"nothing at {request.path}; /api/openapi.json lists the routes")
        return error_response(exc.code or 500, titles.get(exc.code, exc.name), message)
