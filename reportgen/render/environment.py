"""The Jinja2 environment of the report: loaders, filters, escaping.

* ``autoescape=True`` (not ``select_autoescape``, which leaves ``*.j2`` unescaped) and
  ``StrictUndefined``: a misspelt name fails the build instead of printing nothing.
* Filters are registered here and only here (:data:`reportgen.render.filters.FILTERS` plus the
  plain-words readings of :mod:`reportgen.render.readings`).
* Loader chain: the study's own override folder (``report.templates`` in the study
  definition) first, then the built-in templates.  ``default:report.html`` always names the
  built-in file, so an override can extend the template it replaces.  When an override folder
  is in use the whole environment is an ``ImmutableSandboxedEnvironment``: a company template
  cannot reach Python internals or change the context.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any


def builtin_template_dir() -> Path:
    """The folder of the built-in templates (the installed ``reportgen.templates`` package)."""
    try:
        from importlib.resources import files

        p = Path(str(files("reportgen.templates")))
        if (p / "report.html").is_file():
            return p
    except (ModuleNotFoundError, TypeError):
        pass
    return Path(__file__).resolve().parents[2] / "templates"


def make_environment(override_dir: Path | None = None) -> Any:
    """The report's Jinja2 environment (sandboxed when ``override_dir`` is given)."""
    import jinja2
    from jinja2.sandbox import ImmutableSandboxedEnvironment

    from .filters import FILTERS
    from .readings import READINGS

    builtin = jinja2.FileSystemLoader(str(builtin_template_dir()), encoding="utf-8")
    loaders: list[jinja2.BaseLoader] = [jinja2.PrefixLoader({"default": builtin}, delimiter=":")]
    cls: type[jinja2.Environment] = jinja2.Environment
    if override_dir is not None:
        from ..templatefiles import regular_file_loader

        loaders.append(regular_file_loader(Path(override_dir)))
        cls = ImmutableSandboxedEnvironment
    loaders.append(builtin)
    env = cls(
        loader=jinja2.ChoiceLoader(loaders),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
        keep_trailing_newline=True,
        auto_reload=False,
    )
    env.filters.update(FILTERS)
    env.filters.update(READINGS)
    return env
