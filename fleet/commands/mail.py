"""`fleet mail send`: send what waits in the outbox now (alerts and digests whose send failed, e.g. while the
plant's SMTP server was down). Cron may run it; every write and `fleet serve` also try."""

import click


@click.group("mail")
def mail_group() -> None:
    """Mail through the plant's SMTP server (FLEET_SMTP_URL): alerts, the weekly digest, the outbox."""


@mail_group.command("send")
@click.pass_obj
def send(db) -> None:
    """Send every mail waiting in the outbox now, whatever its wait after a failed attempt; exit status 1 when
    some could not be sent (they stay in the outbox)."""
    from fleet.services.mail.outbox import make_due
    from fleet.services.mail.settings import mail_on
    from fleet.services.writes import perform

    db.require_current()
    if not mail_on():
        raise click.ClickException("mail is off: set FLEET_SMTP_URL to the plant's SMTP server")
    outcome = perform(db.sessions, make_due)
    if outcome.mail is None:
        click.echo("the outbox holds nothing to send")
        return
    click.echo(outcome.mail.describe())
    if outcome.mail.failed:
        raise click.ClickException(f"{outcome.mail.failed} mail(s) not sent; they stay in the outbox")


def register(group: click.Group) -> None:
    group.add_command(mail_group)
