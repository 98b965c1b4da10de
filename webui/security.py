"""Safety of the web layer: CSRF on every form, security headers on every response."""

from __future__ import annotations

from flask import Flask, g
from flask_wtf.csrf import CSRFProtect

csrf = CSRFProtect()


def allow_plot_styles() -> None:
    """This response's page draws plotly figures (see :func:`content_security_policy`)."""
    g.magvault_plot_styles = True


def allow_eval() -> None:
    """This response's page draws WebGL traces (see :func:`content_security_policy`)."""
    g.magvault_plot_styles = True
    g.magvault_allow_eval = True


def content_security_policy(eval_needed: bool = False, plot_styles: bool = False) -> str:
    """The page's CSP: scripts only from this server, never inline.

    ``'unsafe-eval'`` is added only to pages that draw WebGL traces (the full-data
    plot): plotly.js's WebGL renderer (regl) compiles its shader wrappers with
    ``new Function``, which CSP counts as eval.  Every other page runs without it.
    Styles come from our stylesheet only, except on pages with plotly figures:
    plotly.js writes its own style rules and ``style`` attributes at run time
    (it cannot be given a nonce), so those pages add ``'unsafe-inline'`` for
    styles (never for scripts).
    """
    script = "'self' 'unsafe-eval'" if eval_needed else "'self'"
    style = "'self' 'unsafe-inline'" if plot_styles else "'self'"
    return "; ".join([
        "default-src 'self'",
        f"script-src {script}",
        f"style-src {style}",
        # data: for plotly's "download as PNG" button, which builds the image in the page.
        "img-src 'self' data: blob:",
        "font-src 'self'",
        "connect-src 'self'",
        "object-src 'none'",
        "base-uri 'self'",
        "form-action 'self'",
        "frame-ancestors 'none'",
    ])


def _refuse_nul_characters() -> None:
    """Text with NUL characters cannot be stored or searched (PostgreSQL refuses it); say so plainly."""
    from flask import abort, request

    if "\x00" in request.path:
        abort(404, description="nothing at an address containing a NUL character")
    sources = [request.args]
    if request.method == "POST" and request.mimetype in ("application/x-www-form-urlencoded", "multipart/form-data"):
        sources.append(request.form)
    for source in sources:
        for key, value in source.items(multi=True):
            if "\x00" in key or "\x00" in value:
                abort(400, description=f"{key.replace(chr(0), '')}: contains a NUL character; remove it and try again")


def init_app(app: Flask) -> None:
    app.before_request(_refuse_nul_characters)
    csrf.init_app(app)

    @app.after_request
    def _headers(response):
        response.headers["Content-Security-Policy"] = content_security_policy(
            bool(g.get("magvault_allow_eval")), bool(g.get("magvault_plot_styles")))
        response.headers["X-Content-Type-Options"] = "nosniff"
        response.headers["X-Frame-Options"] = "DENY"
        response.headers["Referrer-Policy"] = "same-origin"
        response.headers["Cross-Origin-Opener-Policy"] = "same-origin"
        return response
