"""The register of inspectors: who is certified for which characteristic, and until when.

Built from the archive index only.  A line is one rater (by rater id) in one study (all its
archived revisions and rounds ``<id>.round<N>``: its requalifications); two raters sharing a name stay two
lines.  Names are shown as given, in Unicode NFC.  On a given day only the rounds assessed on or
before that day count, and the latest of them decides (latest = study date, then revision, then
archived-at); a failed requalification therefore ends an earlier certification.

Status on a given day (``as_of``), with ``due_within`` days of warning:

* ``not yet certified`` — every round of the study that includes the inspector lies after
  ``as_of``;
* ``not certified`` — the latest round on or before ``as_of`` did not certify the inspector;
* ``expired``       — the certification ended before ``as_of``;
* ``due``           — it ends within ``due_within`` days (requalify soon);
* ``valid``         — otherwise.

Time is always passed in (``as_of``); nothing here reads the clock.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import unicodedata
from collections.abc import Iterable, Sequence
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Literal

from .archive import ArchiveEntry, list_entries
from .rounds import split_round

Status = Literal["valid", "due", "expired", "not certified", "not yet certified"]
STATUSES: tuple[Status, ...] = ("valid", "due", "expired", "not certified", "not yet certified")
#: what ``--fail-on`` matches: ``due`` also matches expired certifications
FAIL_ON: dict[str, frozenset[str]] = {
    "expired": frozenset({"expired"}),
    "due": frozenset({"due", "expired"}),
}
CSV_COLUMNS = (
    "inspector",
    "characteristic",
    "station",
    "outcome",
    "certified_on",
    "valid_until",
    "status",
    "days_left",
    "study_id",
    "revision",
    "rater_id",
)


@dataclass(frozen=True)
class RegisterLine:
    """One inspector for one characteristic."""

    inspector: str
    characteristic: str
    station: str | None
    outcome: str  # "certified" | "not certified" (latest study)
    assessed_on: str | None  # date of the latest study
    certified_on: str | None
    valid_until: str | None
    status: Status
    days_left: int | None  # valid_until - as_of in days (negative once expired)
    study_id: str
    revision: int
    rater_id: str


@dataclass(frozen=True)
class Register:
    as_of: dt.date
    due_within: int | None  # None: each study's own due window
    lines: tuple[RegisterLine, ...]

    def matching(self, statuses: Iterable[str]) -> list[RegisterLine]:
        wanted = set(statuses)
        return [ln for ln in self.lines if ln.status in wanted]

    def counts(self) -> dict[str, int]:
        return {s: sum(ln.status == s for ln in self.lines) for s in STATUSES}


def status_on(
    *, outcome: str, valid_until: str | None, as_of: dt.date, due_within: int
) -> tuple[Status, int | None]:
    """The status of one certification on ``as_of`` and the days left until it ends."""
    if outcome != "certified" or not valid_until:
        return "not certified", None
    left = (dt.date.fromisoformat(valid_until) - as_of).days
    if left < 0:
        return "expired", left
    if left <= due_within:
        return "due", left
    return "valid", left


def _key(text: str) -> str:
    return " ".join(unicodedata.normalize("NFC", text).split()).casefold()


def _nfc(text: str) -> str:
    return unicodedata.normalize("NFC", text)


def build_register(
    entries: Sequence[ArchiveEntry],
    *,
    as_of: dt.date,
    due_within: int | None = None,
) -> Register:
    """The register on ``as_of`` from archived revisions (any order); see the module docstring."""
    rounds: dict[tuple[str, str], list[tuple[tuple[Any, ...], ArchiveEntry, str, dict[str, Any]]]]
    rounds = {}
    for e in entries:
        for rid, c in e.certification.items():
            if not isinstance(c, dict):
                continue
            when = str(c.get("assessed_on") or e.study_date or e.archived_at[:10])
            rank = (when, e.revision, e.archived_at)
            # all rounds of one study (``<id>``, ``<id>.round2`` …) and their revisions
            series = split_round(e.study_id)[0]
            rounds.setdefault((series, str(rid)), []).append((rank, e, str(rid), c))
    lines = []
    for (_study, _rid), found in rounds.items():
        found.sort(key=lambda x: x[0])
        before = [x for x in found if _day(x[0][0]) is not None and _day(x[0][0]) <= as_of]
        if not before:
            rank, e, rid, c = found[0]
            lines.append(
                RegisterLine(
                    inspector=_nfc(str(c.get("name") or rid)),
                    characteristic=e.characteristic or f"study {e.study_id}",
                    station=e.station,
                    outcome="not yet assessed",
                    assessed_on=None,
                    certified_on=None,
                    valid_until=None,
                    status="not yet certified",
                    days_left=None,
                    study_id=e.study_id,
                    revision=e.revision,
                    rater_id=rid,
                )
            )
            continue
        rank, e, rid, c = before[-1]
        window = due_within if due_within is not None else int(c.get("due_window_days") or 30)
        status, left = status_on(
            outcome=str(c.get("outcome")),
            valid_until=c.get("valid_until"),
            as_of=as_of,
            due_within=window,
        )
        lines.append(
            RegisterLine(
                inspector=_nfc(str(c.get("name") or rid)),
                characteristic=e.characteristic or f"study {e.study_id}",
                station=e.station,
                outcome=str(c.get("outcome")),
                assessed_on=rank[0],
                certified_on=c.get("certified_on"),
                valid_until=c.get("valid_until"),
                status=status,
                days_left=left,
                study_id=e.study_id,
                revision=e.revision,
                rater_id=rid,
            )
        )
    lines.sort(
        key=lambda ln: (_key(ln.inspector), _key(ln.characteristic), ln.study_id, ln.rater_id)
    )
    return Register(as_of=as_of, due_within=due_within, lines=tuple(lines))


def _day(text: str) -> dt.date | None:
    try:
        return dt.date.fromisoformat(text[:10])
    except ValueError:
        return None


def shared_names(reg: Register) -> list[str]:
    """Names two or more rater ids share within one characteristic (said under the table)."""
    seen: dict[tuple[str, str], set[tuple[str, str]]] = {}
    for ln in reg.lines:
        seen.setdefault((_key(ln.inspector), _key(ln.characteristic)), set()).add(
            (split_round(ln.study_id)[0], ln.rater_id)
        )
    out = []
    for (_name, _char), ids in sorted(seen.items()):
        studies = {s for s, _r in ids}
        if len(ids) > 1 and len(studies) < len(ids):
            line = next(
                ln
                for ln in reg.lines
                if (_key(ln.inspector), _key(ln.characteristic)) == (_name, _char)
            )
            out.append(
                f"{line.inspector} ({line.characteristic}): rater ids "
                + ", ".join(sorted(f"{r} in {s}" for s, r in ids))
                + " share this name; they are kept as different people"
            )
    return out


def load_register(
    archive_dir: str | Path,
    *,
    as_of: dt.date,
    due_within: int | None = None,
    characteristic: str | None = None,
    station: str | None = None,
) -> Register:
    entries = list_entries(archive_dir, characteristic=characteristic, station=station)
    return build_register(entries, as_of=as_of, due_within=due_within)


# --------------------------------------------------------------------------- output


def _days(ln: RegisterLine) -> str:
    if ln.days_left is None:
        return ""
    if ln.days_left < 0:
        return f"{-ln.days_left} days ago"
    return f"in {ln.days_left} days"


def format_table(reg: Register) -> str:
    """The register as a plain-text table for the terminal."""
    head = (
        "Inspector",
        "Characteristic",
        "Latest outcome",
        "Certified on",
        "Valid until",
        "Status",
        "Ends",
        "Study",
    )
    rows = [
        (
            ln.inspector,
            ln.characteristic,
            ln.outcome,
            ln.certified_on or "—",
            ln.valid_until or "—",
            ln.status,
            _days(ln),
            f"{ln.study_id} rev{ln.revision}",
        )
        for ln in reg.lines
    ]
    widths = [
        max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(head)
    ]
    out = [
        "  ".join(h.ljust(w) for h, w in zip(head, widths, strict=True)).rstrip(),
        "  ".join("-" * w for w in widths),
    ]
    out += ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip() for r in rows]
    counts = reg.counts()
    window = f"{reg.due_within} days" if reg.due_within is not None else "each study's due window"
    out.append("")
    out.append(
        f"Register on {reg.as_of.isoformat()} (due = ends within {window}): "
        + ", ".join(f"{counts[s]} {s}" for s in STATUSES)
    )
    for note in shared_names(reg):
        out.append(f"note: {note}")
    if not rows:
        out.insert(0, "No certifications in the archive.")
    return "\n".join(out) + "\n"


#: a text cell starting with one of these is read as a formula by spreadsheet programs
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def safe_cell(value: Any) -> Any:
    """A text cell that a spreadsheet would run as a formula gets a leading apostrophe;
    numbers are kept as they are."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def csv_rows(reg: Register, *, safe: bool = True) -> list[dict[str, str]]:
    """The register's rows as text by CSV column; ``safe`` writes formula-like cells safely."""
    rows = []
    for ln in reg.lines:
        d = asdict(ln)
        rows.append(
            {c: "" if d[c] is None else str(safe_cell(d[c]) if safe else d[c]) for c in CSV_COLUMNS}
        )
    return rows


def to_csv(reg: Register) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for row in csv_rows(reg):
        w.writerow([row[c] for c in CSV_COLUMNS])
    return buf.getvalue()


def to_html(reg: Register, *, title: str = "Inspector register") -> str:
    """A printable page (templates/register.html)."""
    from .render.environment import make_environment

    env = make_environment()
    return env.get_template("register.html").render(
        title=title,
        as_of=reg.as_of.isoformat(),
        due_within=reg.due_within,
        lines=[asdict(ln) | {"ends": _days(ln)} for ln in reg.lines],
        counts=reg.counts(),
        statuses=STATUSES,
    )
