"""Shared test fixtures.

``make_study(folder=None, **overrides) -> Path`` writes a small, valid study (study.yaml,
ratings.csv, reference.csv) and returns the path of study.yaml.  By default it is an ordinal
study with 3 categories (P, S, X), 30 items, 3 raters (R1-R3), 2 trials, a reference file, and
made-up ratings that raise no ``check`` warning.  Overrides:

* any study-definition key (``scale="binary"``, ``trials=1``, ``missing="allow"``,
  ``criteria={...}``, ``study={"id": ...}`` merged into the ``study`` block …); ``None``
  removes a key;
* ``n_items=``: number of items (ids ``I01``, ``I02`` …);
* ``ratings_rows=[(item, rater, trial, rating), …]`` or ``ratings_text="..."`` (str or bytes)
  to replace the generated ratings; ``reference_rows=[(item, code), …]`` or
  ``reference_text=...`` to replace the reference file (the generated ratings do not change);
* ``yaml_text="..."``: write this study definition verbatim;
* ``files={"name": str | bytes}``: extra files next to study.yaml.

The generated data are deterministic; see :func:`default_ratings` for what they hold.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
import yaml

os.environ.setdefault("MPLBACKEND", "Agg")

DEFAULT_CATEGORIES = [
    {"code": "P", "label": "Premium"},
    {"code": "S", "label": "Standard"},
    {"code": "X", "label": "Scrap"},
]


def default_reference(n_items: int, codes: list[str]) -> list[tuple[str, str]]:
    """Item ``I01`` … with references cycling through the codes."""
    return [(f"I{i + 1:02d}", codes[i % len(codes)]) for i in range(n_items)]


def default_ratings(
    reference: list[tuple[str, str]], raters: list[str], trials: int, codes: list[str]
) -> list[tuple[str, str, int, str]]:
    """Rows ``(item, rater, trial, rating)``: each rater matches the reference except on a
    few items, where they give the next code; which items differs by rater and trial."""
    rows = []
    for r, rater in enumerate(raters):
        for t in range(1, trials + 1):
            for i, (item, ref) in enumerate(reference):
                k = codes.index(ref)
                if (i + 2 * r + t) % 7 == 0:
                    k = (k + 1) % len(codes)
                rows.append((item, rater, t, codes[k]))
    return rows


def write_study(folder: Path, **overrides: Any) -> Path:
    """Write a study into ``folder`` (created if needed); return the study.yaml path."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, content in overrides.pop("files", {}).items():
        target = folder / name
        target.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, bytes):
            target.write_bytes(content)
        else:
            target.write_text(content, encoding="utf-8")
    n_items = overrides.pop("n_items", 30)
    yaml_text = overrides.pop("yaml_text", None)
    ratings_rows = overrides.pop("ratings_rows", None)
    ratings_text = overrides.pop("ratings_text", None)
    reference_rows = overrides.pop("reference_rows", None)
    reference_text = overrides.pop("reference_text", None)

    definition: dict[str, Any] = {
        "study": {"id": "TEST-01", "title": "Test study"},
        "scale": "ordinal",
        "categories": [dict(c) for c in DEFAULT_CATEGORIES],
        "raters": [{"id": f"R{r}", "name": f"Rater {r}"} for r in (1, 2, 3)],
        "trials": 2,
        "ratings": "ratings.csv",
        "reference": "reference.csv",
    }
    study_block = overrides.pop("study", None)
    if study_block:
        definition["study"].update(study_block)
    for key, value in overrides.items():
        if value is None:
            definition.pop(key, None)
        else:
            definition[key] = value

    def codes_of(cats: Any) -> list[str]:
        return [str(c["code"]) if isinstance(c, dict) else str(c) for c in cats]

    codes = codes_of(definition.get("categories", DEFAULT_CATEGORIES))
    raters = [str(r["id"]) if isinstance(r, dict) else str(r) for r in definition.get("raters", [])]
    trials = definition.get("trials", 1)
    trials = trials if isinstance(trials, int) and trials > 0 else 1
    reference = reference_rows if reference_rows is not None else default_reference(n_items, codes)

    if yaml_text is not None:
        (folder / "study.yaml").write_text(yaml_text, encoding="utf-8")
    else:
        (folder / "study.yaml").write_text(
            yaml.safe_dump(definition, sort_keys=False, allow_unicode=True), encoding="utf-8"
        )

    ratings_name = definition.get("ratings")
    if isinstance(ratings_name, dict):
        ratings_name = ratings_name.get("file")
    if isinstance(ratings_name, str) and not (folder / ratings_name).exists():
        if ratings_text is None:
            rows = (
                ratings_rows
                if ratings_rows is not None
                else default_ratings(default_reference(n_items, codes), raters, trials, codes)
            )
            ratings_text = "item,rater,trial,rating\n" + "".join(
                f"{i},{r},{t},{c}\n" for i, r, t, c in rows
            )
        _write(folder / ratings_name, ratings_text)
    ref_name = definition.get("reference")
    if isinstance(ref_name, str) and not (folder / ref_name).exists():
        if reference_text is None:
            reference_text = "item,reference\n" + "".join(f"{i},{c}\n" for i, c in reference)
        _write(folder / ref_name, reference_text)
    return folder / "study.yaml"


def _write(path: Path, content: str | bytes) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8", newline="")


@pytest.fixture
def make_study(tmp_path: Path) -> Callable[..., Path]:
    """Factory: ``make_study(**overrides)`` or ``make_study(folder, **overrides)``."""

    def factory(folder: Path | None = None, /, **overrides: Any) -> Path:
        return write_study(folder if folder is not None else tmp_path / "study", **overrides)

    return factory


@pytest.fixture
def run_cli(capsys: pytest.CaptureFixture[str]) -> Callable[..., tuple[int, str, str]]:
    """Run ``reportgen.cli.main(args)``; return (exit code, stdout, stderr)."""
    from reportgen import cli

    def run(*args: str | Path) -> tuple[int, str, str]:
        capsys.readouterr()
        try:
            cli.main([str(a) for a in args])
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
        else:  # pragma: no cover - main always exits
            code = 0
        out, err = capsys.readouterr()
        return code, out, err

    return run


# --------------------------------------------------------------------------------------------
# One run of `reportgen demo`, shared by every test module (tests/render, tests/test_examples)
# --------------------------------------------------------------------------------------------

#: the build time of the shared demo run (given as SOURCE_DATE_EPOCH): 2026-11-20T09:00:00Z
DEMO_GENERATED_AT = "2026-11-20T09:00:00Z"
DEMO_EPOCH = 1795165200


class DemoRun:
    """The outcome of one ``reportgen demo --output OUT`` over the repository's studies/."""

    def __init__(self, out: Path, result: Any) -> None:
        self.out = out
        self.result = result  # click.testing.Result
        self.exit_code: int = result.exit_code
        self.output: str = result.output

    def folder(self, study_id: str, revision: int = 1) -> Path:
        """The revision folder the demo built for ``study_id``."""
        return self.out / study_id / f"rev{revision}"


@pytest.fixture(scope="session")
def demo_run_once(tmp_path_factory: pytest.TempPathFactory) -> DemoRun:
    """``reportgen demo`` over studies/, run once per test session into a fresh folder.

    Building the three demo reports takes the better part of half a minute, so the render
    tests (tests/render/conftest.py: built_binary, built_ordinal, built_nominal) and the demo
    tests (tests/test_examples.py) all read this one run.  It is built at DEMO_GENERATED_AT
    through SOURCE_DATE_EPOCH, with CI unset so that the demo prints its lines.  Tests must
    not write into it.
    """
    import datetime as dt

    from click.testing import CliRunner

    from reportgen.cli import cli

    assert (
        dt.datetime.fromtimestamp(DEMO_EPOCH, tz=dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
        == DEMO_GENERATED_AT
    )
    studies = Path(__file__).resolve().parents[1] / "studies"
    out = tmp_path_factory.mktemp("demo-run")
    runner = CliRunner(env={"SOURCE_DATE_EPOCH": str(DEMO_EPOCH), "CI": None})
    res = runner.invoke(cli, ["demo", "--output", str(out), "--studies", str(studies)])
    return DemoRun(out, res)
