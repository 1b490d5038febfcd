"""Web interface accounts: create, authenticate, change, disable, remove users.

Readers see everything; curators also write; admins also manage accounts.
Every change that should end a user's open sessions (signing out, a new
password, a role change, disabling) moves the user's `session_generation` on;
the web layer refuses a session cookie from an older generation. Passwords are stored only as
werkzeug's salted hashes (scrypt by default). Like the rest of the catalogue
logic, every function works inside a session the caller opened and none
commits on its own.

Accounts and background jobs are bookkeeping, not catalogue content: write
them through `bookkeeping_sessions(engine)` so that signing up a user does not
move the catalogue revision that keys the search caches.
"""

from __future__ import annotations

import re

from sqlalchemy import select
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session, sessionmaker
from werkzeug.security import check_password_hash, generate_password_hash

from library.catalogue.database import writer_engine
from library.catalogue.models import USER_ROLES, AuditEntry, User
from library.errors import OlibraError, Remedy

MIN_PASSWORD_CHARS = 8
MAX_PASSWORD_CHARS = 200
USERNAME_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._@-]{0,59}$")
# Checked against when the user does not exist, so that both cases take the same time.
_UNKNOWN_USER_HASH = generate_password_hash("olibra: no such user")


class AccountError(OlibraError, ValueError):
    """An account request that cannot be carried out as given."""


def bookkeeping_sessions(engine: Engine) -> sessionmaker[Session]:
    """Sessions for accounts and jobs: same database, without the catalogue revision hook; their
    transactions are write transactions (BEGIN IMMEDIATE on SQLite, see database.writer_engine)."""
    return sessionmaker(bind=writer_engine(engine), expire_on_commit=False)


def check_username(username: str | None) -> str:
    username = (username or "").strip()
    if not USERNAME_PATTERN.match(username):
        raise AccountError(
            f"user name {username[:60]!r} is not valid: use 1-60 letters, digits, '.', '_', '@' or '-', "
            "starting with a letter or digit")
    return username


def check_password(password: str | None) -> str:
    password = password or ""
    if len(password) < MIN_PASSWORD_CHARS:
        raise AccountError(f"the password is too short: use at least {MIN_PASSWORD_CHARS} characters")
    if len(password) > MAX_PASSWORD_CHARS:
        raise AccountError(f"the password is too long: use at most {MAX_PASSWORD_CHARS} characters")
    return password


def check_role(role: str | None) -> str:
    role = (role or "").strip().lower()
    if role not in USER_ROLES:
        raise AccountError(f"role {role!r} is not one of: {', '.join(USER_ROLES)}")
    return role


def find_user(session: Session, username: str) -> User | None:
    return session.scalar(select(User).where(User.username == (username or "").strip()))


def create_user(session: Session, username: str, password: str, role: str = "reader", *,
                actor: str = "olibra") -> User:
    """Add a user; refuses a taken name, a short password or an unknown role."""
    username = check_username(username)
    role = check_role(role)
    password = check_password(password)
    if find_user(session, username) is not None:
        raise AccountError(f"user {username!r} already exists; choose another name "
                           "or change that user's password")
    user = User(username=username, password_hash=generate_password_hash(password), role=role)
    session.add(user)
    session.flush()
    session.add(AuditEntry(actor=actor, action="create", entity="user", entity_id=user.id,
                           field="role", new_value=f"{username} ({role})"))
    return user


def authenticate(session: Session, username: str, password: str) -> User | None:
    """The user if the name and password match and the account is enabled, else None (the same for an
    unknown name, which costs the same time)."""
    user = find_user(session, username) if username else None
    if user is None:
        check_password_hash(_UNKNOWN_USER_HASH, password or "")
        return None
    if not check_password_hash(user.password_hash, password or ""):
        return None
    return None if user.disabled else user


def _existing(session: Session, username: str) -> User:
    user = find_user(session, username)
    if user is None:
        raise AccountError(f"no user {(username or '')[:60]!r}; check the user name", remedy=Remedy.LIST_USERS)
    return user


def _audit(session: Session, user: User, actor: str, field: str, old, new) -> None:
    session.add(AuditEntry(actor=actor, action="update", entity="user", entity_id=user.id, field=field,
                           old_value=None if old is None else str(old), new_value=None if new is None else str(new)))


def end_sessions(user: User) -> None:
    """Every session cookie issued to `user` so far stops working."""
    user.session_generation = (user.session_generation or 0) + 1


def set_password(session: Session, username: str, password: str, *, actor: str = "olibra") -> User:
    user = _existing(session, username)
    user.password_hash = generate_password_hash(check_password(password))
    end_sessions(user)
    _audit(session, user, actor, "password", None, "(changed; open sessions ended)")
    return user


def set_role(session: Session, username: str, role: str, *, actor: str = "olibra") -> User:
    user = _existing(session, username)
    role = check_role(role)
    if user.role != role:
        _audit(session, user, actor, "role", user.role, role)
        user.role = role
        end_sessions(user)
    return user


def set_disabled(session: Session, username: str, disabled: bool, *, actor: str = "olibra") -> User:
    """Disable (cannot sign in, open sessions end at once) or enable a user."""
    user = _existing(session, username)
    if user.disabled != disabled:
        _audit(session, user, actor, "disabled", user.disabled, disabled)
        user.disabled = disabled
        end_sessions(user)
    return user


def remove_user(session: Session, username: str, *, actor: str = "olibra") -> None:
    """Delete a user; the audit trail keeps the name (changes they made stay attributed to them)."""
    user = _existing(session, username)
    session.add(AuditEntry(actor=actor, action="delete", entity="user", entity_id=user.id, field="role",
                           old_value=f"{user.username} ({user.role})"))
    session.delete(user)


def sign_out_everywhere(session: Session, user_id: int) -> None:
    user = session.get(User, user_id)
    if user is not None:
        end_sessions(user)


def list_users(session: Session) -> list[User]:
    return list(session.scalars(select(User).order_by(User.username)))
