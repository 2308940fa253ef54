#!/usr/bin/env python3
"""Check, and where possible install, the system packages reportgen needs.

    python3 system/ensure.py runtime        # what `make demo` needs (Pango, HarfBuzz subset)
    python3 system/ensure.py test           # runtime + what only the tests need

The one list is ``system/packages.tsv``.  On a Debian/Ubuntu machine where apt-get is there
and we are root (or sudo works without a password) the missing packages are installed;
otherwise the script stops with exit 1 and one message naming what is missing and the install
command for Debian/Ubuntu, Fedora and macOS.  It uses the standard library only, so it runs
before any virtual environment exists, and it creates nothing.
"""

from __future__ import annotations

import ctypes.util
import os
import shutil
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

LIST = Path(__file__).with_name("packages.tsv")


@dataclass(frozen=True)
class Package:
    need: str
    debian: str
    fedora: str
    homebrew: str
    probe: str


def read_list(path: Path = LIST) -> list[Package]:
    rows = []
    for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        parts = line.split()
        if parts[3] == "--cask":  # "--cask chromium" is one Homebrew field
            parts[3:5] = [parts[3] + " " + parts[4]]
        if len(parts) != 5 or parts[0] not in ("runtime", "test"):
            raise SystemExit(f"{path}:{n}: expected 'need debian fedora homebrew probe'")
        rows.append(Package(*parts))
    return rows


def wanted(packages: list[Package], need: str) -> list[Package]:
    return [p for p in packages if p.need == "runtime" or need == "test"]


def dpkg_installed(name: str) -> bool | None:
    """True/False from dpkg; None where there is no dpkg."""
    if not shutil.which("dpkg-query"):
        return None
    out = subprocess.run(
        ["dpkg-query", "-W", "-f=${Status}", name], capture_output=True, text=True, check=False
    )
    return out.returncode == 0 and out.stdout.strip().endswith("installed")


def probe(p: Package) -> bool:
    kind, _, what = p.probe.partition(":")
    if kind == "cmd":
        return shutil.which(what) is not None
    return ctypes.util.find_library(what) is not None


def missing(packages: list[Package]) -> list[Package]:
    out = []
    for p in packages:
        have = dpkg_installed(p.debian)
        if have is None:
            have = probe(p)
        if not have:
            out.append(p)
    return out


def _unique(names: list[str]) -> list[str]:
    return list(dict.fromkeys(names))


def instructions(miss: list[Package]) -> str:
    deb = " ".join(_unique([p.debian for p in miss]))
    fed = " ".join(_unique([p.fedora for p in miss]))
    brew_plain = _unique([p.homebrew for p in miss if not p.homebrew.startswith("--cask")])
    casks = _unique([p.homebrew.split()[1] for p in miss if p.homebrew.startswith("--cask")])
    lines = [
        "reportgen needs system libraries that are not installed: " + deb,
        "Install them, then run the same make command again:",
        f"  Debian/Ubuntu:  sudo apt-get update && sudo apt-get install -y {deb}",
        f"  Fedora:         sudo dnf install -y {fed}",
    ]
    brew = []
    if brew_plain:
        brew.append("brew install " + " ".join(brew_plain))
    if casks:
        brew.append("brew install --cask " + " ".join(casks))
    if brew:
        lines.append("  macOS:          " + " && ".join(brew))
    return "\n".join(lines)


def can_install() -> list[str] | None:
    """The command prefix that installs with apt-get, or None where we may not."""
    if not shutil.which("apt-get"):
        return None
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        return []
    if shutil.which("sudo"):
        ok = subprocess.run(["sudo", "-n", "true"], capture_output=True, check=False)
        if ok.returncode == 0:
            return ["sudo", "-n"]
    return None


def install(prefix: list[str], names: list[str]) -> bool:
    env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
    print("reportgen: installing system packages: " + " ".join(names), file=sys.stderr)
    steps = [
        [*prefix, "apt-get", "update", "-qq"],
        [*prefix, "apt-get", "install", "-y", "-qq", *names],
    ]
    for cmd in steps:
        if subprocess.run(cmd, env=env, stdout=subprocess.DEVNULL, check=False).returncode:
            print("reportgen: failed: " + " ".join(cmd), file=sys.stderr)
            return False
    return True


def main(argv: list[str]) -> int:
    need = argv[0] if argv else "runtime"
    if need not in ("runtime", "test"):
        print("usage: ensure.py [runtime|test]", file=sys.stderr)
        return 2
    miss = missing(wanted(read_list(), need))
    if not miss:
        return 0
    prefix = can_install()
    if prefix is not None and install(prefix, _unique([p.debian for p in miss])):
        still = missing(miss)
        if not still:
            return 0
        miss = still
    print(instructions(miss), file=sys.stderr)
    return 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
