"""Web commands: `olibra user add|list|password|role|disable|enable|remove` (accounts) and `olibra serve`."""

from __future__ import annotations

import getpass
import ipaddress
import secrets
import sys

from library.catalogue import accounts
from library.catalogue.database import Catalogue, describe_url, resolve_url
from library.catalogue.models import USER_ROLES
from library.cli.output import FORMATS, emit
from library.errors import OlibraError

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8150


def _catalogue(args) -> Catalogue:
    return Catalogue(resolve_url(args.db, here=args.here))


def read_password(args, *, prompt: str = "password") -> str:
    """From standard input (--password-stdin, first line) or typed twice at the terminal."""
    if args.password_stdin:
        line = sys.stdin.readline()
        if not line:
            raise OlibraError("--password-stdin was given but standard input is empty")
        return line.rstrip("\r\n")
    if not sys.stdin.isatty():
        raise OlibraError("no terminal to type a password at; pipe it in with --password-stdin")
    first = getpass.getpass(f"{prompt}: ")
    if getpass.getpass(f"{prompt} again: ") != first:
        raise OlibraError("the two passwords differ; nothing was changed, try again")
    return first


def cmd_user_add(args) -> int:
    accounts.check_username(args.name)
    accounts.check_role(args.role)
    password = read_password(args, prompt=f"password for {args.name}")
    catalogue = _catalogue(args)
    with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
        user = accounts.create_user(session, args.name, password, args.role,
                                    actor=f"olibra user add ({getpass.getuser()})")
        print(f"user {user.username} added as {user.role}")
    catalogue.dispose()
    return 0


def cmd_user_password(args) -> int:
    password = read_password(args, prompt=f"new password for {args.name}")
    catalogue = _catalogue(args)
    with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
        accounts.set_password(session, args.name, password, actor=f"olibra user password ({getpass.getuser()})")
    catalogue.dispose()
    print(f"password of {args.name} changed")
    return 0


def _change_user(args, change, done: str) -> int:
    catalogue = _catalogue(args)
    actor = f"olibra user {args.action} ({getpass.getuser()})"
    try:
        with accounts.bookkeeping_sessions(catalogue.engine).begin() as session:
            change(session, actor)
    finally:
        catalogue.dispose()
    print(done)
    return 0


def cmd_user_role(args) -> int:
    return _change_user(args, lambda s, actor: accounts.set_role(s, args.name, args.role, actor=actor),
                        f"{args.name} is now {args.role}; their open sessions were ended")


def cmd_user_disable(args) -> int:
    return _change_user(args, lambda s, actor: accounts.set_disabled(s, args.name, True, actor=actor),
                        f"{args.name} is disabled: cannot sign in, open sessions were ended")


def cmd_user_enable(args) -> int:
    return _change_user(args, lambda s, actor: accounts.set_disabled(s, args.name, False, actor=actor),
                        f"{args.name} is enabled and can sign in again")


def cmd_user_remove(args) -> int:
    return _change_user(args, lambda s, actor: accounts.remove_user(s, args.name, actor=actor),
                        f"{args.name} was removed (the audit trail keeps their name)")


def cmd_user_list(args) -> int:
    catalogue = _catalogue(args)
    with accounts.bookkeeping_sessions(catalogue.engine)() as session:
        rows = [{"name": u.username, "role": u.role, "state": "disabled" if u.disabled else "enabled",
                 "created": u.created_at.strftime("%Y-%m-%d %H:%M")}
                for u in accounts.list_users(session)]
    catalogue.dispose()
    emit(rows, ["name", "role", "state", "created"], args.format)
    if args.format == "table" and not rows:
        print("no users yet; add one with `olibra user add NAME --role curator`")
    return 0


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def cmd_serve(args) -> int:
    import os

    import waitress

    from webui import SECRET_KEY_VARIABLE, create_app
    from webui.background import mark_abandoned

    if not 0 <= args.port < 65536:
        raise OlibraError(f"port {args.port} is not between 0 (any free port) and 65535")
    url = resolve_url(args.db, here=args.here)
    catalogue = Catalogue(url)  # refuses a missing or old schema before we bind a port
    config = {"OLIBRA_DB": url}
    if args.processes:
        config["OLIBRA_JOB_PROCESSES"] = args.processes
    if args.cluster:
        config["OLIBRA_JOB_CLUSTER"] = args.cluster
    if not os.environ.get(SECRET_KEY_VARIABLE):
        if not is_loopback(args.host):
            raise OlibraError(f"serving on {args.host} needs a fixed secret key: set {SECRET_KEY_VARIABLE} "
                              "to a long random string (sessions are signed with it)")
        config["SECRET_KEY"] = secrets.token_hex(32)
        print(f"warning: {SECRET_KEY_VARIABLE} is not set; using a random key for this run, "
              "so everyone must sign in again after a restart", file=sys.stderr)
    app = create_app(config)
    with accounts.bookkeeping_sessions(catalogue.engine)() as session:
        users = accounts.list_users(session)
    if not any(u.role in ("curator", "admin") and not u.disabled for u in users):
        print("note: no curator account yet; add one with `olibra user add NAME --role curator`",
              file=sys.stderr)
    abandoned = mark_abandoned(accounts.bookkeeping_sessions(catalogue.engine))
    if abandoned:
        print(f"note: {abandoned} job(s) left running by a stopped server were marked interrupted",
              file=sys.stderr)
    catalogue.dispose()
    try:
        server = waitress.create_server(app, host=args.host, port=args.port, threads=args.threads,
                                        ident="olibra")
    except OSError as exc:
        raise OlibraError(f"cannot listen on {args.host}:{args.port}: {exc.strerror}; "
                          "choose another --port or stop what uses it") from None
    shown_host = f"[{args.host}]" if ":" in args.host else args.host
    print(f"olibra web interface for {describe_url(url)} on http://{shown_host}:{server.effective_port}/ "
          "(Ctrl-C stops it)", flush=True)
    try:
        server.run()
    except KeyboardInterrupt:
        print("olibra: server stopped", file=sys.stderr)
    finally:
        server.close()
    return 0


def register(commands) -> None:
    p = commands.add_parser("user")
    actions = p.add_subparsers(dest="action", metavar="ACTION", parser_class=type(p))
    actions.required = True
    q = actions.add_parser("add", help="add a user (the password is asked for, or read with --password-stdin)")
    q.add_argument("name")
    q.add_argument("--role", choices=USER_ROLES, default="reader",
                   help="reader (sees everything), curator (also adds, edits, imports) or admin (also manages "
                        "accounts in the web interface); default reader")
    q.add_argument("--password-stdin", action="store_true", help="read the password from standard input")
    q.set_defaults(handler=cmd_user_add)
    q = actions.add_parser("list", help="list users and their roles")
    q.add_argument("--format", choices=FORMATS, default="table")
    q.set_defaults(handler=cmd_user_list)
    q = actions.add_parser("password", help="change a user's password")
    q.add_argument("name")
    q.add_argument("--password-stdin", action="store_true", help="read the password from standard input")
    q.set_defaults(handler=cmd_user_password)
    q = actions.add_parser("role", help="change a user's role (ends their open sessions)")
    q.add_argument("name")
    q.add_argument("role", choices=USER_ROLES)
    q.set_defaults(handler=cmd_user_role)
    for action, handler, text in (("disable", cmd_user_disable, "stop a user signing in and end their sessions"),
                                  ("enable", cmd_user_enable, "let a disabled user sign in again"),
                                  ("remove", cmd_user_remove, "delete a user (the audit trail keeps the name)")):
        q = actions.add_parser(action, help=text)
        q.add_argument("name")
        q.set_defaults(handler=handler)

    p = commands.add_parser("serve")
    p.add_argument("--host", default=DEFAULT_HOST,
                   help=f"address to listen on (default {DEFAULT_HOST}: this machine only)")
    p.add_argument("--port", type=int, default=DEFAULT_PORT, help=f"port (default {DEFAULT_PORT})")
    p.add_argument("--threads", type=int, default=8,
                   help="request threads (default 8; keep it above the heavy-search workers plus their queue, "
                        "so that cheap pages are answered while heavy searches run)")
    p.add_argument("--processes", type=int, default=None,
                   help="worker processes for recompute jobs (default: one per core)")
    p.add_argument("--cluster", metavar="ADDRESS", default=None,
                   help="run recompute jobs on this Dask cluster (tcp://HOST:8786 or local:N; default "
                        "$OLIBRA_CLUSTER, else local worker processes)")
    p.set_defaults(handler=cmd_serve)
