"""``reportgen demo``: run the main job on every demo study in ``studies/``.

For each ``studies/*/study.yaml``: load and check the study and its ratings, compute the
results, judge them against the study's criteria (when the verdict module is present), and
build the report into the output folder (when the report builder is present).  A revision
folder that does not exist yet is built as a final report, as ``reportgen build`` would; one
that exists (an earlier demo run) is rebuilt as a DRAFT, and the study's line says so.
Without the report builder the results are written as ``<output>/<study-id>/results.json``.
Only click is imported at module level.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import click

from . import json_option, quiet_option, show_progress


def _default_studies() -> Path:
    """The repository's ``studies/`` folder, else ``./studies``."""
    here = Path(__file__).resolve().parents[2] / "studies"
    return here if here.is_dir() else Path.cwd() / "studies"


def _has(module: str, attr: str | None = None) -> bool:
    import importlib
    import importlib.util

    try:
        if importlib.util.find_spec(module) is None:
            return False
    except ModuleNotFoundError:
        return False
    if attr is None:
        return True
    return hasattr(importlib.import_module(module), attr)


def _write_json_atomic(path: Path, data: Any) -> None:
    import json
    import tempfile

    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            json.dump(data, fh, indent=2, sort_keys=False, allow_nan=False)
            fh.write("\n")
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def find_demo_studies(folder: Path) -> list[Path]:
    """Every ``<folder>/*/study.yaml``, sorted by folder name."""
    return sorted(folder.glob("*/study.yaml"))


def run_demo_study(path: Path, *, output: Path, quiet: bool = True) -> dict[str, Any]:
    """The main job on one study; returns a short summary (id, design, verdict, written files).

    Check (load the study and its ratings: every input problem raises InputError), compute the
    results, judge them when the verdict module is present, then build the report when the
    report builder is present, else write ``<output>/<study-id>/results.json``.  The report is
    final when its revision folder is new; an existing folder is rebuilt as a draft
    (``summary["draft"]`` is then True).
    """
    from ..analysis import analyse
    from ..ratings import load_ratings
    from ..study import load_study

    study = load_study(path)
    ratings = load_ratings(study)
    results = dict(analyse(study, ratings))
    if _has("reportgen.verdict", "judge"):
        from ..verdict import judge

        results.update(judge(study, results))
    verdict = results.get("verdict")
    summary: dict[str, Any] = {
        "study": study.id,
        "path": str(path),
        "items": ratings.n_items,
        "raters": ratings.n_raters,
        "trials": ratings.n_trials,
        "verdict": verdict.get("outcome") if isinstance(verdict, dict) else verdict,
        "written": [],
        "draft": False,
    }
    if _has("reportgen.render.build", "build_report"):
        from ..render.build import build_report, revision_dir

        draft = revision_dir(output, study).exists()
        summary["draft"] = draft
        summary["revision"] = study.revision
        built = build_report(
            study, output_dir=output, replace=draft, ratings=ratings, results=results
        )
        summary["written"] = [str(p) for p in _paths_of(built)]
        return summary
    target = output / study.id / "results.json"
    _write_json_atomic(target, results)
    summary["written"] = [str(target)]
    return summary


def _paths_of(built: Any) -> list[Path]:
    """Whatever build_report returned, as a list of written paths (best effort, for the log)."""
    if built is None:
        return []
    if isinstance(built, (str, Path)):
        return [Path(built)]
    if isinstance(built, dict):
        return [Path(v) for v in built.values() if isinstance(v, (str, Path))]
    for name in ("paths", "files", "written"):
        value = getattr(built, name, None)
        if isinstance(value, (list, tuple)):
            return [Path(v) for v in value]
    for name in ("pdf", "html", "folder"):
        value = getattr(built, name, None)
        if isinstance(value, (str, Path)):
            return [Path(value)]
    return []


def _verdict_text(verdict: Any) -> str:
    if verdict is None:
        return "no verdict"
    if isinstance(verdict, dict):
        return str(verdict.get("outcome") or verdict.get("verdict") or verdict)
    return str(verdict)


@click.command("demo")
@click.option(
    "-o",
    "--output",
    "output",
    type=click.Path(file_okay=False, path_type=Path),
    default=Path("output"),
    show_default=True,
    help="Folder the demo results and reports are written into.",
)
@click.option(
    "--studies",
    "studies",
    type=click.Path(file_okay=False, exists=True, path_type=Path),
    default=None,
    help="Folder holding the demo studies (one sub-folder with a study.yaml each).",
)
@json_option("one summary per study")
@quiet_option()
def command(output: Path, studies: Path | None, as_json: bool, quiet: bool) -> None:
    """Run the main job on every demo study: check, analyse, judge and build its report."""
    folder = studies if studies is not None else _default_studies()
    paths = find_demo_studies(folder)
    if not paths:
        from ..errors import InputError

        raise InputError.single(folder, "no demo study found (expected */study.yaml)")
    from . import progress_printer

    progress = progress_printer(quiet) if show_progress(quiet) else None
    infos = []
    for n, path in enumerate(paths, 1):
        if progress:
            progress(f"[{n}/{len(paths)}] {path.parent.name}")
        info = run_demo_study(path, output=output, quiet=quiet)
        infos.append(info)
        if not quiet and not as_json:
            draft = (
                f" (DRAFT: revision {info.get('revision', '?')} was built before, so it was rebuilt "
                "as a draft; raise study.revision or use a new --output folder for a final report)"
                if info.get("draft")
                else ""
            )
            click.echo(
                f"{info['study']}: {info['items']} items, {info['raters']} raters, "
                f"{info['trials']} trial{'' if info['trials'] == 1 else 's'} -> "
                f"{_verdict_text(info['verdict'])}{draft}"
            )
            for written in info["written"]:
                click.echo(f"  wrote {written}")
    if as_json:
        import json

        click.echo(json.dumps(infos, indent=2, default=str))
