"""Our own error pages (and JSON errors under /api): a clear message, never a traceback."""

from __future__ import annotations

from flask import jsonify, render_template, request
from flask_wtf.csrf import CSRFError
from sqlalchemy.exc import OperationalError
from werkzeug.exceptions import HTTPException, InternalServerError

from library.catalogue.database import CatalogueBusy, CatalogueError, busy_message, is_busy
from library.errors import OlibraError, Remedy
from webui.heavy import ServerBusy

TITLES = {
    400: "The request could not be used",
    401: "Sign in first",
    403: "Not allowed",
    404: "Not found",
    405: "Not allowed here",
    413: "Upload too large",
    500: "Something went wrong on our side",
    503: "The server is busy or the catalogue is not available",
}
ADVICE = {
    404: "Nothing lives at this address. Check the link, or go back to the catalogue.",
    405: "This address does not accept that kind of request.",
    500: ("olibra hit an internal problem and nothing was changed by this request. "
          "Try again; if it happens again, tell whoever runs this server what you did."),
}


# What the web suggests for each remedy the core names (the command line has its own hints).
HINTS = {
    Remedy.COMPUTE_RECORDS: "a curator can start a recompute on the Jobs page",
    Remedy.INIT_CATALOGUE: "whoever runs this server must create or upgrade the catalogue",
    Remedy.FIND_MATERIAL: "the Catalogue page lists every material with its id",
    Remedy.ADD_MATERIAL: "a curator can add it on the Add material page",
    Remedy.VOCABULARY: "the Vocabulary page lists the terms; curators can add new ones there",
    Remedy.IMPORT_OBSERVATIONS: "ask whoever keeps the observation data sets to import it",
    Remedy.LIST_USERS: "ask whoever runs this server which accounts exist",
}


def user_message(exc: OlibraError) -> str:
    """The message a web user sees for a user error: the core's words and, if any, the web's hint."""
    hint = HINTS.get(exc.remedy) if getattr(exc, "remedy", None) else None
    return f"{exc}" + (f" ({hint})" if hint else "")


def _answer(status: int, message: str, *, plain: bool = False):
    if request.path.startswith("/api/"):
        return jsonify(error={"status": status, "message": message}), status
    return render_template("errors/error.html", status=status, title=TITLES.get(status, "Error"),
                           message=message, plain=plain), status


def init_app(app) -> None:
    @app.errorhandler(CSRFError)
    def csrf_error(exc: CSRFError):
        return _answer(400, "The form's security token is missing or no longer valid "
                            f"({exc.description.rstrip('.')}). Reload the page and try again; "
                            "API clients send the token from GET /api/session in an X-CSRF-Token header.")

    @app.errorhandler(413)
    def too_large(_exc):
        limit = app.config.get("MAX_CONTENT_LENGTH") or 0
        shown = f"{limit / 2**20:g} MiB" if limit >= 2**20 else f"{limit / 1024:g} KiB"
        return _answer(413, f"The upload is larger than the limit of this server, {shown}. "
                            "Split the file into smaller parts and import them one by one.")

    @app.errorhandler(HTTPException)
    def http_error(exc: HTTPException):
        status = exc.code or 500
        if status >= 500:
            return internal_error(exc)
        default_description = type(exc).description
        message = exc.description if exc.description and exc.description != default_description else None
        return _answer(status, message or ADVICE.get(status) or TITLES.get(status, "Error") + ".")

    @app.errorhandler(CatalogueError)
    def catalogue_unavailable(exc: CatalogueError):
        return _answer(503, user_message(exc), plain=True)

    @app.errorhandler(OperationalError)
    def database_problem(exc: OperationalError):
        if is_busy(exc):
            response, status = _answer(503, f"{busy_message()[0].upper()}{busy_message()[1:]}.", plain=True)
            response = app.make_response((response, status))
            response.headers["Retry-After"] = "5"
            return response
        app.logger.exception("database problem")
        first_line = str(exc.orig).strip().splitlines()[0] if exc.orig else "no detail"
        return _answer(503, f"The catalogue database did not answer ({first_line}); nothing was changed. "
                            "Try again in a moment.", plain=True)

    @app.errorhandler(ServerBusy)
    def server_busy(exc: ServerBusy):
        response = app.make_response(_answer(503, f"{str(exc)[0].upper()}{str(exc)[1:]}.", plain=False))
        response.headers["Retry-After"] = str(exc.retry_after_s)
        return response

    @app.errorhandler(CatalogueBusy)
    def catalogue_busy(exc: CatalogueBusy):
        response = app.make_response(_answer(503, str(exc), plain=True))
        response.headers["Retry-After"] = "5"
        return response

    @app.errorhandler(OlibraError)
    def user_problem(exc: OlibraError):
        return _answer(400, user_message(exc))

    @app.errorhandler(Exception)
    def internal_error(exc):
        if not isinstance(exc, HTTPException):
            app.logger.exception("internal error while answering %s %s", request.method, request.path)
        return _answer(500, ADVICE[500], plain=True)

    app.register_error_handler(InternalServerError, internal_error)
