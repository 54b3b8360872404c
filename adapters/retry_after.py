"""Reading a server's ``Retry-After`` header: how long it asks us to wait.

RFC 9110 §10.2.3 allows two forms: a whole number of seconds (``delay-seconds``) or
an HTTP-date. HTTP-dates (§5.6.7) are written as IMF-fixdate, and recipients must
also accept the two obsolete forms, RFC 850 dates and C's asctime format. A value
in neither form is ignored (the caller falls back to its own back-off) rather than
guessed at: a misread wait is worse than none.
"""

from __future__ import annotations

import re
from datetime import datetime, timedelta, timezone

_DAY = r"(?:Mon|Tue|Wed|Thu|Fri|Sat|Sun)"
_DAY_LONG = r"(?:Monday|Tuesday|Wednesday|Thursday|Friday|Saturday|Sunday)"
_MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")
_MONTH = "(?P<month>" + "|".join(_MONTHS) + ")"
_TIME = r"(?P<hour>\d\d):(?P<minute>\d\d):(?P<second>\d\d)"

# RFC 9110 §5.6.7 grammar, one pattern per form (HTTP-date is case-sensitive there).
_IMF_FIXDATE = re.compile(
    rf"{_DAY}, (?P<day>\d\d) {_MONTH} (?P<year>\d{{4}}) {_TIME} GMT")
_RFC850 = re.compile(
    rf"{_DAY_LONG}, (?P<day>\d\d)-{_MONTH}-(?P<year>\d\d) {_TIME} GMT")
_ASCTIME = re.compile(
    rf"{_DAY} {_MONTH} (?P<day>\d\d| \d) {_TIME} (?P<year>\d{{4}})")
_DELAY_SECONDS = re.compile(r"\d+")


def _date_from(match: re.Match[str], year: int) -> datetime | None:
    second = min(int(match["second"]), 59)  # §5.6.7 allows :60 for a leap second
    try:
        return datetime(year, _MONTHS.index(match["month"]) + 1, int(match["day"]),
                        int(match["hour"]), int(match["minute"]), second, tzinfo=timezone.utc)
    except ValueError:  # 31 Feb, hour 25 and the like
        return None


def _rfc850_year(two_digits: int, now: datetime) -> int:
    # §5.6.7: a two-digit year that would put the date more than 50 years in the future
    # means the most recent past year with those last two digits.
    year = now.year - now.year % 100 + two_digits
    if year > now.year + 50:
        year -= 100
    return year


def parse_http_date(text: str, now: datetime | None = None) -> datetime | None:
    """The instant an HTTP-date names (UTC), or None if ``text`` is not one.

    ``now`` is needed only to place an RFC 850 date's two-digit year.
    """
    text = text.strip()
    if m := _IMF_FIXDATE.fullmatch(text):
        return _date_from(m, int(m["year"]))
    if m := _RFC850.fullmatch(text):
        return _date_from(m, _rfc850_year(int(m["year"]), _aware(now)))
    if m := _ASCTIME.fullmatch(text):
        return _date_from(m, int(m["year"]))
    return None


def _aware(now: datetime | None) -> datetime:
    if now is None:
        return datetime.now(timezone.utc)
    return now if now.tzinfo is not None else now.replace(tzinfo=timezone.utc)


def retry_after_seconds(value: str | None, now: datetime) -> float | None:
    """Seconds a ``Retry-After`` value asks to wait from ``now``; None if absent or unreadable.

    A date already past asks for no wait (0). ``now`` without a time zone is taken as UTC.
    """
    if value is None:
        return None
    text = value.strip()
    if _DELAY_SECONDS.fullmatch(text):
        return float(int(text))
    now = _aware(now)
    when = parse_http_date(text, now)
    if when is None:
        return None
    return max((when - now) / timedelta(seconds=1), 0.0)
