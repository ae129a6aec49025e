"""A user's own page: their mail address, whether the weekly digest comes, and the pumps they follow."""

from sqlalchemy.orm import Session

from fleet.services.mail.follows import follows_of, scope_choices
from fleet.services.mail.settings import mail_on
from fleet.services.users import active_user

FOLLOW_COLUMNS = ("scope", "label")


def account_page(session: Session, user_id: int) -> dict:
    user = active_user(session, user_id)
    if user is None:
        raise LookupError("no such active user")
    follows = follows_of(session, user_id)
    followed = {f["scope"] for f in follows}
    return {
        "name": user.name, "role": user.role, "email": user.email, "digest": user.digest,
        "follows": follows,
        "choices": [c for c in scope_choices(session) if c["scope"] not in followed],
        "mail_on": mail_on(),
    }
