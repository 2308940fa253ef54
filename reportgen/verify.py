"""Is this report genuine?  Read a report PDF back and check it against itself.

A report PDF carries its inputs as attachments (the study definition, the ratings, the
reference file) and ``results.json``.  ``verify_report`` checks, in order:

1. **signature** — if the PDF is signed: intact, covering the whole file, who and when;
2. **attachments** — the study definition, the ratings and results.json are there;
3. **identity** — the attachments are of the study and revision the report is about;
4. **input hashes** — the SHA-256 of every attached input is the one printed in the report's
   data integrity section, and every input listed there is attached;
5. **recomputation** — the attached inputs, analysed and judged by the installed reportgen,
   give results.json again (every number equal, or within 1e-12);
6. **printed figures** — the main figures of results.json appear in the report's text as the
   report formats them (the verdict, and each headline figure with its interval);
7. **document** — the report is rebuilt from its attachments and its build record
   (``build-record.json``: build time, state, software versions) with the build pipeline, and the
   original revision of the file is compared with the rebuild byte for byte (page text and
   annotations, difference by difference, when other software versions built it), see
   :mod:`reportgen.rebuild`;
8. **appended** — nothing follows the report as built, except signature updates that a signature
   covers (a signed report).

Every failed check says what it found in words; :func:`verify_report` returns the findings
and the command exits 1 when any failed.  A changed byte in an attachment fails 4 (and 5); a
changed number in results.json fails 5 (and 6); attachments stripped from the PDF fail 2; a
report whose attachments were swapped for another study's fails 3.
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .attached import materialise
from .errors import InputError
from .pdfread import GENERATED_ATTACHMENTS, read_attachments  # noqa: F401  (re-exported)

TOLERANCE = 1e-12
#: attachments ``build`` makes (not inputs): covered by the rebuild, not by the printed SHA-256 list
#: the line every DRAFT report carries on its first page (templates/report.html)
DRAFT_MARK = "DRAFT — built with --replace; not a released revision"
#: measure keys the report prints as percentages (the report's own convention, templates/_macros.html)
PERCENT_KEYS = frozenset(
    {
        "agreement",
        "effectiveness",
        "miss_rate",
        "false_alarm_rate",
        "exact",
        "within_one_step",
        "exact_agreement",
        "within_one_agreement",
    }
)
#: figures checked against the printed text: (section, measure); per-rater sections use every rater
PRINTED_PANEL = (("reproducibility", "agreement"), ("reproducibility", "fleiss_kappa"))
PRINTED_RATER = (("repeatability", "agreement"), ("accuracy", "effectiveness"))
_HEX_RUN = re.compile(r"(?<![0-9A-Za-z])[0-9a-f]{8,64}(?:[ \t\r\n]+[0-9a-f]{1,64}){0,4}")
_SPACES = re.compile(r"[\s\u00a0\u2009\u202f]+")


@dataclass(frozen=True)
class Finding:
    """The outcome of one check."""

    check: str  # signature | attachments | identity | hashes | recompute | printed
    ok: bool
    message: str
    details: tuple[str, ...] = ()


@dataclass
class Verification:
    """Everything ``verify`` found about one PDF."""

    pdf: Path
    study_id: str | None = None
    revision: int | None = None
    findings: list[Finding] = field(default_factory=list)
    seconds: float = 0.0
    draft: bool = False  # the report says it is a DRAFT (built with --replace)
    notes: list[str] = field(default_factory=list)  # worth saying, but not a failed check
    state: str | None = None  # release | draft, from the build record (None: no record)

    @property
    def ok(self) -> bool:
        return all(f.ok for f in self.findings)

    def add(
        self, check: str, ok: bool, message: str, details: list[str] | tuple[str, ...] = ()
    ) -> None:
        self.findings.append(Finding(check, ok, message, tuple(details)))

    def failures(self) -> list[Finding]:
        return [f for f in self.findings if not f.ok]

    def format(self) -> str:
        who = f"{self.study_id} rev{self.revision}" if self.study_id else str(self.pdf)
        head = f"{self.pdf}: {who}: " + (
            "GENUINE — every check holds" if self.ok else "NOT GENUINE — see the failed checks"
        )
        if self.draft:
            head += " (a DRAFT built with --replace, not a released revision)"
        lines = [head]
        for f in self.findings:
            lines.append(f"  {'ok  ' if f.ok else 'FAIL'}  {f.check}: {f.message}")
            lines += [f"          {d}" for d in f.details]
        lines += [f"  note  {n}" for n in self.notes]
        return "\n".join(lines) + "\n"

    def as_dict(self) -> dict[str, Any]:
        return {
            "pdf": str(self.pdf),
            "genuine": self.ok,
            "draft": self.draft,
            "state": self.state,
            "study": {"id": self.study_id, "revision": self.revision},
            "findings": [
                {"check": f.check, "ok": f.ok, "message": f.message, "details": list(f.details)}
                for f in self.findings
            ],
            "notes": list(self.notes),
            "seconds": self.seconds,
        }


# --------------------------------------------------------------------------- PDF reading


def _read_pdf(path: Path) -> tuple[bytes, dict[str, bytes], str, dict[str, str], str | None]:
    """Bytes, attachments, page text, metadata of the PDF, and why it could not be read (or None)."""
    import io

    import pypdf

    if not path.is_file():
        raise InputError.single(path, "the report PDF does not exist")
    data = path.read_bytes()
    if not data.startswith(b"%PDF-"):
        raise InputError.single(path, "not a PDF file")
    try:
        reader = pypdf.PdfReader(io.BytesIO(data))
        attachments = {str(n): bytes(d[0]) for n, d in reader.attachments.items() if d}
        text = "\n".join(page.extract_text() or "" for page in reader.pages)
        meta = {str(k): str(v) for k, v in (reader.metadata or {}).items()}
    except Exception as exc:  # noqa: BLE001 - pypdf raises many types on a damaged file
        return data, {}, "", {}, f"{type(exc).__name__}: {exc}"
    return data, attachments, text, meta, None


def printed_hashes(text: str) -> list[tuple[int, int, str]]:
    """SHA-256 values printed in the text, also when a table cell wrapped them over lines.

    Returns (start, end, hash) for each.
    """
    out = []
    for m in _HEX_RUN.finditer(text):
        total = ""
        for part in m.group(0).split():
            total += part
            if len(total) >= 64:
                break
        if len(total) == 64:
            out.append((m.start(), m.end(), total))
    return out


def _flat(text: str) -> str:
    """Text with every run of white space (incl. thin and no-break spaces) as one space."""
    return _SPACES.sub(" ", text)


def _squash(text: str) -> str:
    return _SPACES.sub("", text)


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


# --------------------------------------------------------------------------- comparison


def compare_results(embedded: Any, recomputed: Any, path: str = "") -> list[tuple[str, Any, Any]]:
    """Every place where two results documents differ; numbers equal within 1e-12."""
    out: list[tuple[str, Any, Any]] = []
    if isinstance(embedded, dict) and isinstance(recomputed, dict):
        for k in sorted(set(embedded) | set(recomputed), key=str):
            p = f"{path}.{k}" if path else str(k)
            if k not in embedded:
                out.append((p, "(absent)", recomputed[k]))
            elif k not in recomputed:
                out.append((p, embedded[k], "(absent)"))
            else:
                out += compare_results(embedded[k], recomputed[k], p)
        return out
    if isinstance(embedded, list) and isinstance(recomputed, list):
        if len(embedded) != len(recomputed):
            return [(f"{path} (length)", len(embedded), len(recomputed))]
        for i, (a, b) in enumerate(zip(embedded, recomputed, strict=True)):
            out += compare_results(a, b, f"{path}[{i}]")
        return out
    if isinstance(embedded, bool) or isinstance(recomputed, bool):
        return (
            []
            if type(embedded) is type(recomputed) and embedded == recomputed
            else [(path, embedded, recomputed)]
        )
    num = (int, float)
    if isinstance(embedded, num) and isinstance(recomputed, num):
        if embedded == recomputed or math.isclose(
            embedded, recomputed, rel_tol=TOLERANCE, abs_tol=TOLERANCE
        ):
            return []
        return [(path, embedded, recomputed)]
    if type(embedded) is not type(recomputed) or embedded != recomputed:
        return [(path, embedded, recomputed)]
    return []


def count_numbers(x: Any) -> int:
    if isinstance(x, dict):
        return sum(count_numbers(v) for v in x.values())
    if isinstance(x, list):
        return sum(count_numbers(v) for v in x)
    return int(isinstance(x, int | float) and not isinstance(x, bool))


def _short(v: Any) -> str:
    text = json.dumps(v) if not isinstance(v, str) else v
    return text if len(text) <= 60 else text[:57] + "…"


# --------------------------------------------------------------------------- recomputation


def recompute(
    attachments: dict[str, bytes], study_name: str, *, progress: Callable[[str], None] | None = None
) -> tuple[dict[str, Any], Any]:
    """Write the attachments into a temporary folder, load, analyse and judge them.

    Returns (results, study).  Raises InputError naming the attachment when the inputs
    cannot be loaded; ``ValueError`` with a sentence when an input the study names is missing.
    """
    from .ratings import load_ratings
    from .render.build import compute_results
    from .study import load_study

    say = progress or (lambda _m: None)
    with materialise(attachments, study_name) as (study_path, _sources):
        say("loading the attached inputs")
        study = load_study(study_path)
        ratings = load_ratings(study)
        say("recomputing")
        return compute_results(study, ratings), study


# --------------------------------------------------------------------------- printed figures


def printed_figures(results: dict[str, Any]) -> list[tuple[str, str, str]]:
    """(what, estimate as printed, interval as printed) for the headline figures."""
    from .render.filters import fmt_ci, fmt_estimate, fmt_pct

    def fmt(rec: dict[str, Any], key: str) -> tuple[str, str]:
        if key in PERCENT_KEYS:
            return fmt_pct(rec), fmt_ci(rec, 1, pct=True)
        return fmt_estimate(rec), fmt_ci(rec)

    out: list[tuple[str, str, str]] = []

    def add(what: str, rec: Any, key: str) -> None:
        if isinstance(rec, dict) and rec.get("estimate") is not None:
            est, ci = fmt(rec, key)
            out.append((what, est, ci))

    for section, key in PRINTED_PANEL:
        block = results.get(section)
        if isinstance(block, dict):
            add(f"{section}.{key}", block.get(key), key)
    for section, key in PRINTED_RATER:
        block = results.get(section)
        if isinstance(block, dict):
            for rater, measures in block.items():
                if isinstance(measures, dict):
                    add(f"{section}.{rater}.{key}", measures.get(key), key)
    verdict = results.get("verdict")
    if isinstance(verdict, dict):
        for rule in verdict.get("rules") or []:
            if isinstance(rule, dict) and isinstance(rule.get("measure"), str):
                add(f"criterion {rule['measure']}", rule, rule["measure"].rsplit(".", 1)[-1])
    return out


def _printed(flat: str, squashed: str, text: str) -> bool:
    return _flat(text) in flat or _squash(text) in squashed


# --------------------------------------------------------------------------- the checks


def _identity_from_report(meta: dict[str, str], flat: str) -> tuple[str | None, int | None]:
    m = re.match(r"^(\S+) revision (\d+)\b", meta.get("/Title", ""))
    if m:
        return m.group(1), int(m.group(2))
    m = re.search(r"(\S+) · revision (\d+) · ", flat)
    if m:
        return m.group(1), int(m.group(2))
    return None, None


def verify_report(
    pdf: str | Path,
    *,
    trust: tuple[Path, ...] = (),
    progress: Callable[[str], None] | None = None,
) -> Verification:
    """Check a report PDF; see the module docstring.  Raises InputError if it is no readable PDF."""
    t0 = time.perf_counter()
    path = Path(pdf)
    say = progress or (lambda _m: None)
    v = Verification(path)
    data, attachments, text, meta, damage = _read_pdf(path)
    flat, squashed = _flat(text), _squash(text)
    report_id, report_rev = _identity_from_report(meta, flat)
    v.study_id, v.revision = report_id, report_rev
    if report_id is not None and not re.fullmatch(
        re.escape(f"{report_id}-rev{report_rev}") + r"(?:[-_. ].*)?\.pdf", path.name, re.IGNORECASE
    ):
        v.notes.append(
            f"the file name {path.name} does not match the study it holds ({report_id} revision "
            f"{report_rev}, built as {report_id}-rev{report_rev}.pdf)"
        )
    v.draft = DRAFT_MARK in flat

    # 1. signature
    from .sigcheck import has_signature

    if has_signature(data):
        say("checking the signature")
        from .sigcheck import check_signatures

        for s in check_signatures(data, trust=trust):
            ok = s.ok and (s.trusted or not trust)
            msg = s.describe()
            if s.ok and trust and not s.trusted:
                msg += " — not signed by a certificate given with --trust"
            v.add("signature", ok, msg)
    else:
        v.add(
            "signature",
            not trust,
            "none: the report is not signed" + (" but --trust was given" if trust else ""),
        )

    if damage is not None:
        v.add("readable", False, f"the PDF is damaged and cannot be read: {damage}")
        return _done(v, t0)

    # 2. attachments
    study_names = [n for n in attachments if n.lower().endswith((".yaml", ".yml"))]
    if not attachments:
        v.add(
            "attachments",
            False,
            "the PDF carries no attachments: the study definition, the ratings and results.json were "
            "stripped, so nothing can be checked or recomputed",
        )
        return _done(v, t0)
    missing = []
    if "results.json" not in attachments:
        missing.append("results.json")
    if len(study_names) != 1:
        missing.append(
            "the study definition (.yaml)" if not study_names else "a single study definition"
        )
    hashes = printed_hashes(text)
    input_names = sorted(n for n in attachments if n not in GENERATED_ATTACHMENTS)
    if missing:
        v.add(
            "attachments",
            False,
            "attachments stripped: " + ", ".join(missing) + " not attached",
            [f"attached: {', '.join(sorted(attachments))}"],
        )
        _check_hashes(v, attachments, input_names, text, hashes)
        return _done(v, t0)
    v.add("attachments", True, ", ".join(sorted(attachments)))
    try:
        embedded = json.loads(attachments["results.json"].decode("utf-8"))
        if not isinstance(embedded, dict):
            raise ValueError("not a JSON object")
    except (ValueError, UnicodeDecodeError) as exc:
        v.add(
            "recompute", False, f"edited results: the attached results.json cannot be read ({exc})"
        )
        return _done(v, t0)

    # 3. identity
    study_block = embedded.get("study") if isinstance(embedded.get("study"), dict) else {}
    att_id, att_rev = study_block.get("id"), study_block.get("revision")
    if report_id is None:
        v.add(
            "identity",
            False,
            "the report's own study id and revision cannot be read from its title or header",
        )
    elif (att_id, att_rev) != (report_id, report_rev):
        v.add(
            "identity",
            False,
            f"another study's data: the attachments are of {att_id} rev{att_rev}, but the report is of "
            f"{report_id} rev{report_rev}",
        )
    else:
        v.add(
            "identity",
            True,
            f"the attachments are of {report_id} rev{report_rev}, as the report says",
        )

    # 4. input hashes
    _check_hashes(v, attachments, input_names, text, hashes)

    # 5. recomputation (from the rebuild when the PDF carries its build record) and
    # 7. the whole document: the original revision against a rebuild, and what was appended
    from . import __version__
    from .buildrecord import RECORD_NAME, STATE_KEY, parse_record

    built_with = meta.get("/Creator", "")
    record = None
    record_problem = None
    if RECORD_NAME not in attachments:
        record_problem = (
            f"the PDF carries no build record ({RECORD_NAME}): it was stripped, or the report was "
            "built by a reportgen older than 0.2; the document cannot be rebuilt and compared"
        )
    else:
        try:
            record = parse_record(attachments[RECORD_NAME])
        except ValueError as exc:
            record_problem = f"edited build record: {exc}"
    if record is not None:
        v.draft = record.draft
        v.state = record.state
        state = meta.get("/" + STATE_KEY)
        if state != record.state:
            record_problem = (
                f"the PDF's document information says the state is {state or '(none)'}, its build "
                f"record says {record.state}"
            )
    rebuilt = None
    try:
        if record is not None:
            from .errors import RenderError
            from .rebuild import rebuild_report

            try:
                rebuilt = rebuild_report(attachments, study_names[0], record, progress=say)
            except RenderError as exc:
                record_problem = f"the report cannot be rebuilt from its attachments: {exc}"
            recomputed = rebuilt.results if rebuilt is not None else None
            if rebuilt is None:
                recomputed, _study = recompute(attachments, study_names[0], progress=say)
        else:
            recomputed, _study = recompute(attachments, study_names[0], progress=say)
    except InputError as exc:
        v.add(
            "recompute",
            False,
            "the attached inputs cannot be loaded:",
            [p.format() for p in exc.problems()][:8],
        )
        recomputed = None
    except (ValueError, UnicodeDecodeError) as exc:
        v.add("recompute", False, f"cannot recompute: {exc}")
        recomputed = None
    if recomputed is not None:
        recomputed = json.loads(json.dumps(recomputed))  # same JSON types as the embedded copy
        diffs = compare_results(embedded, recomputed)
        if diffs:
            details = [
                f"{p}: results.json has {_short(a)}, recomputed {_short(b)}"
                for p, a, b in diffs[:8]
            ]
            if len(diffs) > 8:
                details.append(f"… and {len(diffs) - 8} more")
            if built_with and built_with != f"reportgen {__version__}":
                details.append(
                    f"note: the report was built by {built_with}; this is reportgen {__version__}"
                )
            v.add(
                "recompute",
                False,
                f"edited results: {len(diffs)} value(s) in results.json differ from a recomputation from the "
                "attached inputs",
                details,
            )
        else:
            v.add(
                "recompute",
                True,
                f"recomputed with reportgen {__version__}: all {count_numbers(embedded)} numbers of results.json "
                f"agree (within {TOLERANCE:g})",
            )

    # 6. printed figures
    figures = printed_figures(embedded)
    outcome = (
        (embedded.get("verdict") or {}).get("outcome")
        if isinstance(embedded.get("verdict"), dict)
        else None
    )
    wrong: list[str] = []
    if outcome and report_id and f"{report_id} · revision {report_rev} · {outcome}" not in flat:
        wrong.append(f"verdict: results.json says {outcome}, the report's header does not")
    for what, est, ci in figures:
        if not _printed(flat, squashed, est):
            wrong.append(f"{what}: results.json gives {est}, which the report does not print")
        elif ci != "—" and not _printed(flat, squashed, ci):
            wrong.append(
                f"{what}: results.json gives the interval {ci}, which the report does not print"
            )
    if wrong:
        v.add(
            "printed",
            False,
            f"{len(wrong)} figure(s) of results.json are not what the report prints",
            wrong[:10],
        )
    else:
        v.add(
            "printed",
            True,
            f"the verdict and {len(figures)} headline figures appear in the report as results.json gives them",
        )

    _check_document(v, data, record, rebuilt, record_problem, signed=has_signature(data))
    return _done(v, t0)


def _check_hashes(
    v: Verification,
    attachments: dict[str, bytes],
    names: list[str],
    text: str,
    hashes: list[tuple[int, int, str]],
) -> None:
    listed = {h for _s, _e, h in hashes}
    wrong, matched = [], set()
    for name in names:
        h = _sha(attachments[name])
        if h in listed:
            matched.add(h)
            continue
        printed = None
        for m in re.finditer(re.escape(name), text):  # the hash printed in the row of this file
            printed = next((x for s_, _e, x in hashes if m.end() <= s_ <= m.end() + 400), None)
            if printed:
                break
        if printed:
            matched.add(printed)
            wrong.append(
                f"edited attachment: {name} has SHA-256 {h[:16]}…, but the report lists {printed[:16]}… for it"
            )
        else:
            wrong.append(f"{name}: its SHA-256 {h[:16]}… is not listed in the report")
    unattached = sorted(listed - matched - {_sha(d) for d in attachments.values()})
    for h in unattached:
        wrong.append(
            f"attachment stripped: the report lists an input with SHA-256 {h[:16]}… that is not attached"
        )
    if not names and not unattached:
        return
    if wrong:
        v.add("hashes", False, "the attached inputs are not the ones the report lists", wrong)
    else:
        v.add(
            "hashes", True, f"{len(names)} attached input(s) have the SHA-256 printed in the report"
        )


def _check_document(
    v: Verification,
    data: bytes,
    record: Any,
    rebuilt: Any,
    problem: str | None,
    *,
    signed: bool,
) -> None:
    """The ``document`` check: the original revision against the rebuild; what was appended."""
    from .pdftail import appended_problems, original_end
    from .rebuild import compare_pages

    end = original_end(data)
    wrong: list[str] = []
    if problem is not None:
        v.add("document", False, problem)
    elif rebuilt is not None:
        original = data[:end]
        if rebuilt.pdf == original:
            v.add(
                "document",
                True,
                f"rebuilt from its attachments and build record: the {end:,} bytes of the report as "
                "built are identical to the rebuild",
            )
        else:
            from .render.context import _versions

            same_software = record.software == _versions()
            wrong = compare_pages(original, rebuilt.pdf)
            if not wrong and not same_software:
                theirs = ", ".join(f"{s.get('name')} {s.get('version')}" for s in record.software)
                v.add(
                    "document",
                    True,
                    "rebuilt from its attachments and build record with other software versions "
                    f"than the report's ({theirs}): the bytes differ, but the text and annotations "
                    "of every page agree",
                )
            else:
                if not wrong:
                    wrong = [
                        "the text of every page agrees, but other content (charts, images, fonts, "
                        "attachments or metadata) differs from the rebuild by the same software"
                    ]
                v.add(
                    "document",
                    False,
                    "edited report: the report as built is not what its attachments build "
                    f"({len(wrong)} difference(s))",
                    wrong[:12],
                )
    appended = appended_problems(data, end, signed=signed)
    if appended:
        v.add(
            "appended",
            False,
            "content was added to the report after it was built"
            + (" that no signature covers" if signed else ""),
            appended[:8],
        )
    elif len(data) > end and signed:
        v.add("appended", True, "only signature updates follow the report as built")


def _done(v: Verification, t0: float) -> Verification:
    v.seconds = time.perf_counter() - t0
    return v
