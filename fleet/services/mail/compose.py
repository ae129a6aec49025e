"""The words of each mail, as plain text and as HTML (a multipart/alternative message carries both).

The HTML comes from Jinja templates under templates/mail/ with autoescaping on, so every value is escaped; it has
inline styles only and no image of any kind, so a mail reader fetches nothing from anywhere.
"""

from functools import cache
from urllib.parse import quote

from jinja2 import Environment, FileSystemLoader, StrictUndefined, select_autoescape

from fleet.resources import folder
from fleet.safety import CAUTION_TITLE, CAUTIONS, CHECK_NOW_CAUTION, calls_for_work
from fleet.services.mail.settings import link
from fleet.status_words import STATUS_LABELS

SUBJECT_PREFIX = "[fleet]"


@cache
def _templates() -> Environment:
    return Environment(loader=FileSystemLoader(str(folder("templates") / "mail")), undefined=StrictUndefined,
                       autoescape=select_autoescape(default=True, default_for_string=True))


def one_line(text: str) -> str:
    """``text`` without line breaks or control characters: fit for a header."""
    return " ".join("".join(ch if ch.isprintable() else " " for ch in str(text)).split())


def label(status: str | None) -> str:
    return STATUS_LABELS.get(status, status or "not analysed before")


def alert(change: dict, follow_words: str) -> tuple[str, str, str]:
    """(subject, text, html) of an alert: a followed pump got worse. ``change`` holds the pump, where it sits,
    the statuses before and after, its reasons and figures (see fleet.services.mail.outbox.queue_alerts)."""
    values = {
        **change, "status_label": label(change["status"]), "previous_label": label(change["previous_status"]),
        "pump_link": link(f"pumps/{quote(change['pump'], safe='')}"), "account_link": link("account"),
        "follow_words": follow_words, "caution_title": CAUTION_TITLE, "cautions": CAUTIONS,
    }
    subject = one_line(f"{SUBJECT_PREFIX} {change['pump']} is now {values['status_label']} "
                       f"(was {values['previous_label']})")
    place = change.get("place") or "not installed"
    lines = [f"Pump {change['pump']} ({change['kind_label']}, {place}) is now {values['status_label']}; "
             f"it was {values['previous_label']}.", "", "Why:"]
    lines += [f"  - {reason}" for reason in change["reasons"]] or ["  - (no reason given)"]
    figures = _figures(change)
    if figures:
        lines += ["", "; ".join(figures)]
    lines += ["", f"Open the pump: {values['pump_link']}", "", f"{CAUTION_TITLE}:"]
    lines += [f"  ! {line}" for line in CAUTIONS]
    lines += ["", f"You get this mail because you follow {follow_words}. Change what you follow: "
                  f"{values['account_link']}"]
    html = _templates().get_template("alert.html").render(figures=figures, **values)
    return subject, "\n".join(lines) + "\n", html


def _figures(change: dict) -> list[str]:
    figures = []
    if change.get("eta_v_ref") is not None:
        figures.append(f"η_v,ref {change['eta_v_ref']:.3f}")
    if change.get("hours_to_limit") is not None:
        figures.append(f"{change['hours_to_limit']:,.0f} h to the limit")
    if change.get("limit_date"):
        figures.append(f"limit expected {change['limit_date']}")
    return figures


def digest(data: dict, text: str) -> tuple[str, str, str]:
    """(subject, text, html) of the weekly review: ``data`` from fleet.services.pages.review.weekly_review,
    ``text`` its plain-text report (as `fleet review` prints it)."""
    week = f"{data['week_start'][:10]} to {data['week_end'][:10]}"
    counts = data["counts"]
    summary = ", ".join(f"{n} {data['sections'].get(key, key).lower()}" for key, n in counts.items() if n)
    subject = one_line(f"{SUBJECT_PREFIX} Weekly review {week}: {summary or 'nothing to report'}")
    review_link = link("review" + (f"?week={quote(data['week'])}" if data.get("week") else ""))
    sections = []
    for key, title in data["sections"].items():
        rows = [item for item in data.get("items", []) if item.get("section") == key]
        sections.append({"title": title, "count": counts.get(key, len(rows)), "rows": rows})
    html = _templates().get_template("digest.html").render(
        week=week, sections=sections, review_link=review_link, account_link=link("account"), label=label,
        calls_for_work=calls_for_work, check_now_caution=CHECK_NOW_CAUTION, caution_title=CAUTION_TITLE,
        cautions=CAUTIONS)  # as the review page: a reason that sends someone to the pump, and the cautions
    body = (f"{text.rstrip()}\n\nThe review on the dashboard: {review_link}\n"
            f"No more weekly mail: untick it at {link('account')}\n")
    return subject, body, html
