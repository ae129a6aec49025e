"""`fleet user`: add people who sign in to the dashboard, set their passwords, and issue or revoke API tokens."""

import sys

import click

from fleet.kinds import ROLES

ROLE_HELP = "viewer (reads), technician (+ readings and lab results), engineer (+ register, limits, events, plan)"


def _password(from_stdin: bool) -> str:
    """The new password: the first line of standard input, or typed twice without echo."""
    if from_stdin:
        return sys.stdin.readline().rstrip("\r\n")
    return click.prompt("Password", hide_input=True, confirmation_prompt="Repeat the password")


def _when(value) -> str:
    return value.strftime("%Y-%m-%d %H:%M") if value else "-"


@click.group("user")
def user_group() -> None:
    """Manage who signs in (roles: viewer, technician, engineer) and the API tokens of data loggers."""


@user_group.command("add")
@click.argument("name")
@click.option("--role", required=True, type=click.Choice(ROLES), help=ROLE_HELP)
@click.option("--email", "address", metavar="ADDRESS", help="where their alerts and weekly digest go")
@click.option("--password-stdin", is_flag=True, help="read the password from the first line of standard input")
@click.pass_obj
def add(db, name: str, role: str, address: str | None, password_stdin: bool) -> None:
    """Add user NAME with ROLE; the password is asked for twice (at least 10 characters)."""
    from fleet.services import users
    from fleet.services.writes import perform

    db.require_current()
    password = _password(password_stdin)
    try:
        user = perform(db.sessions, lambda session: users.create_user(session, name, role, password, address)).value
        click.echo(f"user {user.name} added as {user.role}" + (f", mail to {user.email}" if user.email else ""))
    except users.UserError as error:
        raise click.ClickException(str(error)) from error


@user_group.command("password")
@click.argument("name")
@click.option("--password-stdin", is_flag=True, help="read the password from the first line of standard input")
@click.pass_obj
def password(db, name: str, password_stdin: bool) -> None:
    """Set a new password for NAME; the user's open sessions end."""
    from fleet.services import users
    from fleet.services.writes import perform

    db.require_current()
    new_password = _password(password_stdin)
    try:
        perform(db.sessions, lambda session: users.set_password(session, name, new_password))
    except users.UserError as error:
        raise click.ClickException(str(error)) from error
    click.echo(f"password of {name} changed")


@user_group.command("email")
@click.argument("name")
@click.argument("address")
@click.pass_obj
def email(db, name: str, address: str) -> None:
    """Send NAME's alerts and weekly digest to ADDRESS ('' removes the address: no mail)."""
    from fleet.services import users
    from fleet.services.writes import perform

    db.require_current()
    try:
        user = perform(db.sessions, lambda session: users.set_email(session, name, address)).value
    except users.UserError as error:
        raise click.ClickException(str(error)) from error
    click.echo(f"mail for {user.name} goes to {user.email}" if user.email else f"{user.name} gets no mail")


@user_group.command("disable")
@click.argument("name")
@click.pass_obj
def disable(db, name: str) -> None:
    """Disable NAME: their open sessions end now and their API tokens stop working (kept for the record)."""
    _set_active(db, name, False)


@user_group.command("enable")
@click.argument("name")
@click.pass_obj
def enable(db, name: str) -> None:
    """Let a disabled NAME sign in again (with the password they had)."""
    _set_active(db, name, True)


def _set_active(db, name: str, active: bool) -> None:
    from fleet.services import users
    from fleet.services.writes import perform

    db.require_current()
    try:
        perform(db.sessions, lambda session: users.set_active(session, name, active))
    except users.UserError as error:
        raise click.ClickException(str(error)) from error
    click.echo(f"user {name} {'enabled' if active else 'disabled; their sessions ended'}")


@user_group.command("list")
@click.pass_obj
def list_(db) -> None:
    """List the users and the API tokens (never a password or a token itself)."""
    from fleet.services import users

    db.require_current()
    with db.sessions() as session:
        people, tokens = users.list_users(session), users.list_tokens(session)
    click.echo(f"{'user':<24} {'role':<11} {'active':<7} {'last sign-in':<17} {'tokens':<7} mail")
    for p in people:
        mail = (p["email"] + ("" if p["digest"] else " (no digest)")) if p["email"] else "-"
        click.echo(f"{p['name']:<24} {p['role']:<11} {'yes' if p['active'] else 'no':<7} "
                   f"{_when(p['last_login_at']):<17} {p['tokens']:<7} {mail}")
    if tokens:
        click.echo(f"\n{'token id':>8}  {'user':<24} {'label':<30} {'created':<17} {'last used':<17} revoked")
        for t in tokens:
            click.echo(f"{t['id']:>8}  {t['user']:<24} {t['label'][:30]:<30} {_when(t['created_at']):<17} "
                       f"{_when(t['last_used_at']):<17} {_when(t['revoked_at'])}")


@user_group.command("token")
@click.argument("name")
@click.option("--label", required=True, help="what or who uses the token, e.g. 'press hall data logger'")
@click.pass_obj
def token(db, name: str, label: str) -> None:
    """Issue an API token for NAME and print it once (send it as 'Authorization: Bearer TOKEN')."""
    from fleet.services import users
    from fleet.services.writes import perform

    db.require_current()
    try:
        issued = perform(db.sessions, lambda session: users.create_token(session, name, label)).value
    except users.UserError as error:
        raise click.ClickException(str(error)) from error
    click.echo(f"token {issued.id} for {issued.user} ('{issued.label}'); it is shown only now, keep it safe:",
               err=True)
    click.echo(issued.secret)


@user_group.command("revoke")
@click.argument("token_id", type=int)
@click.pass_obj
def revoke(db, token_id: int) -> None:
    """Revoke API token TOKEN_ID (see 'fleet user list'); requests with it are refused from now on."""
    from fleet.services import users
    from fleet.services.writes import perform

    db.require_current()
    try:
        revoked = perform(db.sessions, lambda session: users.revoke_token(session, token_id)).value
        click.echo(f"token {revoked.id} ('{revoked.name}') revoked at {_when(revoked.revoked_at)}")
    except users.UserError as error:
        raise click.ClickException(str(error)) from error


def register(group: click.Group) -> None:
    group.add_command(user_group)
