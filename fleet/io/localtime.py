"""Local wall-clock times of a site, to and from the naive UTC fleet stores (IANA zones through zoneinfo).

A time written without an offset is read in its site's zone. Around a daylight-saving change a wall-clock time
can fail to exist (clocks jump forward over it) or happen twice (clocks go back over it); fleet refuses both with
the reason and the offsets that would settle it, rather than guess which moment was meant.
"""

from datetime import UTC, datetime, timedelta
from functools import lru_cache
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError, available_timezones

import numpy as np
import pandas as pd

DEFAULT_ZONE = "UTC"


class ZoneError(ValueError):
    """A time zone name that is not an IANA zone."""


@lru_cache(maxsize=64)
def zone(name: str | None) -> ZoneInfo:
    """The IANA zone ``name`` (blank: UTC); ZoneError names a bad one."""
    text = (name or "").strip() or DEFAULT_ZONE
    try:
        if "/" not in text and text not in {"UTC", "GMT"} and text not in _plain_names():
            raise ZoneInfoNotFoundError(text)
        return ZoneInfo(text)
    except (ZoneInfoNotFoundError, ValueError, OSError):
        raise ZoneError(f"'{text}' is not an IANA time zone name (e.g. Europe/Berlin, America/Chicago, UTC)") \
            from None


@lru_cache(maxsize=1)
def _plain_names() -> frozenset[str]:
    return frozenset(name for name in available_timezones() if "/" not in name)


def zone_name(name: str | None) -> str:
    """The canonical spelling of a valid zone name (raises ZoneError)."""
    return zone(name).key


def offset_text(offset: timedelta) -> str:
    """'+01:00', '-06:00', '+05:30'."""
    minutes = int(offset.total_seconds() // 60)
    sign = "-" if minutes < 0 else "+"
    hours, rest = divmod(abs(minutes), 60)
    return f"{sign}{hours:02d}:{rest:02d}"


def to_local(stored: datetime | None, zone_text: str | None) -> datetime | None:
    """A stored naive-UTC time as an aware time in the zone."""
    if stored is None:
        return None
    return stored.replace(tzinfo=UTC).astimezone(zone(zone_text))


def iso_local(stored: datetime | None, zone_text: str | None, timespec: str = "seconds") -> str | None:
    """ISO 8601 with the offset, e.g. '2026-01-15T08:00:00-06:00'."""
    local = to_local(stored, zone_text)
    return None if local is None else local.isoformat(timespec=timespec)


def form_value(stored: datetime | None, zone_text: str | None) -> str:
    """A stored time as an <input type=datetime-local> value in the zone (no offset: the label names the zone)."""
    local = to_local(stored, zone_text)
    return "" if local is None else f"{local:%Y-%m-%dT%H:%M}"


def _wall(stamp: pd.Timestamp) -> str:
    return f"{stamp:%Y-%m-%d %H:%M}" if stamp.second == 0 and stamp.microsecond == 0 else f"{stamp}"


def localize(naive: pd.Series, zones: pd.Series) -> tuple[pd.Series, dict[int, str]]:
    """Wall-clock times read in each row's zone, as naive UTC; and a reason for each row that has no one moment.

    ``naive`` holds Timestamps (NaT where blank); ``zones`` an IANA name per row (same index). The rows named in
    the reasons (by position) come back as NaT.
    """
    values = naive.to_numpy(dtype="datetime64[ns]")
    out = np.full(len(values), np.datetime64("NaT"), dtype="datetime64[ns]")
    reasons: dict[int, str] = {}
    codes, names = pd.factorize(zones.fillna(DEFAULT_ZONE).to_numpy())
    for code, name in enumerate(names):
        where = np.flatnonzero(codes == code)  # row positions read in this zone
        key = zone(name).key
        if key == "UTC":
            out[where] = values[where]
            continue
        rows = pd.Series(values[where], index=where)
        earlier = rows.dt.tz_localize(key, ambiguous=np.ones(len(rows), dtype=bool), nonexistent="NaT")
        later = rows.dt.tz_localize(key, ambiguous=np.zeros(len(rows), dtype=bool), nonexistent="NaT")
        gap = (rows.notna() & earlier.isna()).to_numpy()
        fold = (rows.notna() & earlier.notna() & (earlier != later)).to_numpy()
        good = rows.notna().to_numpy() & ~gap & ~fold
        out[where[good]] = earlier[good].dt.tz_convert("UTC").dt.tz_localize(None).to_numpy(dtype="datetime64[ns]")
        for position in where[gap]:
            reasons[int(position)] = (
                f"{_wall(rows[position])} does not exist in {key}: the clocks skip that hour when daylight saving "
                "time begins; check the time, or write it with its UTC offset")
        for position in where[fold]:
            first, second = earlier[position], later[position]
            reasons[int(position)] = (
                f"{_wall(rows[position])} happens twice in {key}: the clocks go back over that hour when daylight "
                f"saving time ends; write it with its offset, {offset_text(first.utcoffset())} for the first or "
                f"{offset_text(second.utcoffset())} for the second")
    return pd.Series(out, index=naive.index), reasons
