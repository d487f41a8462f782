"""The review page's web server (Flask): one page, a few JSON calls, every request with the token.

The server keeps nothing a crash could lose: each call reads and appends the journal through
``ReviewSession``. It listens on the loopback interface unless told otherwise, and every
request (the page, its script and style, the JSON calls) must carry the per-run token, in the
``token`` query parameter or the ``X-Review-Token`` header; JSON calls that change something
must be POSTs with a JSON body, which a cross-site form cannot send.
"""
from __future__ import annotations

import hmac
from importlib import resources
from pathlib import Path

from flask import Flask, abort, jsonify, request, send_from_directory

from .session import DecisionRefused, ReviewSession

STATIC = Path(str(resources.files("titlematch.review").joinpath("static")))
_HEADERS = {
    # nothing from outside, no inline script: data shown as text cannot turn into code
    "Content-Security-Policy": "default-src 'none'; script-src 'self'; style-src 'self'; connect-src 'self'; "
                               "img-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'",
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
    "X-Frame-Options": "DENY",
}


def create_app(session: ReviewSession, token: str) -> Flask:
    app = Flask("titlematch.review", static_folder=None)
    app.config["MAX_CONTENT_LENGTH"] = 64 * 1024

    @app.before_request
    def _check_token():
        given = request.headers.get("X-Review-Token") or request.args.get("token") or ""
        if not hmac.compare_digest(given.encode("utf-8", "replace"), token.encode("utf-8")):
            return jsonify(error="this page needs the address with its token, as printed by 'titlematch review'"), 403
        return None

    @app.after_request
    def _headers(response):
        for name, value in _HEADERS.items():
            response.headers[name] = value
        return response

    @app.get("/")
    def page():
        html = (STATIC / "review.html").read_text(encoding="utf-8")
        # the token is URL-safe base64 (secrets.token_urlsafe): it needs no escaping in an attribute
        response = app.response_class(html.replace("__TOKEN__", token), mimetype="text/html")
        return response

    @app.get("/static/<path:name>")
    def static_file(name: str):
        if name not in ("review.js", "review.css"):
            abort(404)
        return send_from_directory(STATIC, name, max_age=0)

    @app.get("/api/state")
    def state():
        return jsonify(session.state())

    @app.get("/api/search")
    def search():
        return jsonify(results=session.search(request.args.get("q", "")))

    def _body() -> dict:
        body = request.get_json(silent=True)
        if not isinstance(body, dict):
            raise DecisionRefused("the request must be a JSON object")
        return body

    @app.post("/api/decide")
    def decide():
        body = _body()
        return jsonify(session.decide(str(body.get("title", "")), str(body.get("action", "")),
                                      str(body.get("code", "") or ""), str(body.get("remark", "") or "")))

    @app.post("/api/undo")
    def undo():
        _body()
        return jsonify(session.undo())

    @app.errorhandler(DecisionRefused)
    def _refused(error):
        return jsonify(error=str(error)), 400

    @app.errorhandler(404)
    def _missing(error):
        return jsonify(error="no such page"), 404

    @app.errorhandler(413)
    def _too_large(error):
        return jsonify(error="request too large"), 413

    return app


def serve(app: Flask, host: str, port: int, on_ready) -> None:
    """Serve until interrupted; ``on_ready(actual_port)`` runs once the socket is bound."""
    import logging

    from werkzeug.serving import make_server

    logging.getLogger("werkzeug").setLevel(logging.WARNING)  # no line per request in the coder's terminal
    server = make_server(host, port, app, threaded=True)
    on_ready(server.server_port)
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
