"""How the review date of a signed review must relate to its signing time.

A signed review is evidence of a check made on a given day: waivers are judged against
that day, so a review date set far back would revive expired waivers.  The rule: the
review date may not lie after the signing time, nor more than :data:`MAX_REVIEW_AGE_DAYS`
days before the signing day (UTC).  A date "lies after" the signing time only when it had
not yet begun anywhere on Earth (UTC+14) when the file was signed, so a reviewer east of
Greenwich may write their own calendar day.

Without a timestamp authority the signing time is the signer's clock, written into the
signature (``/M``) and the evidence (``signed_at``); the rule ties the review date to it.
"""

from __future__ import annotations

import datetime as dt

__all__ = ["MAX_REVIEW_AGE_DAYS", "review_date_problem", "signing_time_text"]

#: Most days the review date may lie before the signing day (UTC).
MAX_REVIEW_AGE_DAYS = 3
_EARLIEST_ZONE = dt.timezone(dt.timedelta(hours=14))     # where a calendar day begins first


def review_date_problem(review_date: dt.date, signed_at: dt.datetime) -> str | None:
    """Why ``review_date`` may not go with a signature made at ``signed_at``; None if it may.

    Parameters
    ----------
    review_date : date
        The review's date (the evidence's ``date``).
    signed_at : datetime
        The signing time, timezone-aware.
    """
    signed_utc = signed_at.astimezone(dt.UTC)
    begins = dt.datetime.combine(review_date, dt.time(0), tzinfo=_EARLIEST_ZONE)
    if begins > signed_utc:
        return (f"the review date {review_date.isoformat()} lies after the signing time "
                f"{signing_time_text(signed_utc)}")
    age = (signed_utc.date() - review_date).days
    if age > MAX_REVIEW_AGE_DAYS:
        return (f"the review date {review_date.isoformat()} lies {age} days before the "
                f"signing time {signing_time_text(signed_utc)}; at most "
                f"{MAX_REVIEW_AGE_DAYS} are allowed")
    return None


def signing_time_text(when: dt.datetime) -> str:
    """``when`` in UTC as ``YYYY-MM-DDTHH:MM:SSZ`` (the form the evidence records)."""
    return when.astimezone(dt.UTC).replace(microsecond=0).strftime("%Y-%m-%dT%H:%M:%SZ")
