"""Rule-set generations of a multi-worker server: every worker serves one verified set, and
all of them switch to a new one at the same instant, without a restart.

Before, ``--workers 2`` answered ``SIGHUP`` the way uvicorn's supervisor does: it replaced the
worker processes one after the other, each loading the rule directory as it then was. For
seconds two rule sets answered side by side, a set lint rejects could be loaded by a worker
that restarted, and the workers stopped on the way reset their keep-alive clients (9 resets
in one reload).

Now the supervisor (``service.api.server``) owns the rule set:

1. It loads the rule directory (and site file) and verifies it as lint does
   (``verified_runtime``); a set that fails is refused and logged, and nothing else happens.
2. It copies exactly the files it verified into a private directory, generation *n*
   (``publish``), and verifies the copy, which is what the workers will load.
3. It signals every worker (``SIGHUP``); each loads and verifies generation *n* beside the set
   it serves (``prepare``) and reports ready, or why not, in that directory.
4. Only when every worker is ready does the supervisor commit: one write of *n* to a small
   shared memory map that every worker reads at the start of each request. From that write
   on every new request, on every worker, is answered by generation *n*; a request already
   running finishes with the set it began with. If a worker cannot load *n* in time, nothing
   is committed and every worker goes on with the old set (logged).

A worker that starts later (uvicorn replaces one that died) loads the committed generation,
never the live directory. The map holds the generation and its bitwise complement, written in
that order and read until they agree, so a read racing the write is simply read again.
"""

from __future__ import annotations

import json
import mmap
import os
import shutil
import struct
import tempfile
from dataclasses import dataclass
from pathlib import Path

from service.config import Settings
from service.runtime import Runtime
from service.workbench.lint import verified_runtime

STATE_VARIABLE = "_OXYRULE_GENERATIONS"  # the private directory, for the workers (not a setting)
FLAG_FILE = "committed"
_FLAG = struct.Struct("<QQ")  # the generation, then its complement
_MASK = 0xFFFF_FFFF_FFFF_FFFF
SITE_FILE = "site.yaml"


def _read_flag(view: mmap.mmap) -> int:
    while True:
        value, check = _FLAG.unpack_from(view, 0)
        if value ^ check == _MASK:
            return int(value)


@dataclass(frozen=True, slots=True)
class Published:
    """A generation the supervisor copied and verified: its number and identity."""

    number: int
    identity: str  # id|version content-hash


def _identity(runtime: Runtime) -> str:
    ruleset = runtime.ruleset
    return f"{ruleset.id}|{ruleset.version} {ruleset.content_hash}"


class Generations:
    """The supervisor's side: the private directory, the copies, the commit."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self.committed = 0
        flag = root / FLAG_FILE
        if not flag.exists():
            flag.write_bytes(_FLAG.pack(0, _MASK))
        self._file = flag.open("r+b")
        self._view = mmap.mmap(self._file.fileno(), _FLAG.size)

    @classmethod
    def create(cls) -> Generations:
        """A new private directory (mode 0700, removed by ``close``)."""
        return cls(Path(tempfile.mkdtemp(prefix="oxyrule-generations-")))

    def settings_for(self, number: int, base: Settings) -> Settings:
        """``base`` with the rule directory and site file of generation ``number``."""
        return settings_for(self.root, number, base)

    def publish(self, settings: Settings) -> Published:
        """Copy the rule directory (and site file) into the next generation and verify the
        copy as lint does. Raises what ``verified_runtime`` raises; nothing is kept then."""
        verified_runtime(settings)  # the live files first: refuse before copying anything
        number = self.committed + 1
        target = self.root / str(number)
        shutil.rmtree(target, ignore_errors=True)
        try:
            shutil.copytree(settings.rules_dir, target / "rules", symlinks=False)
            if settings.site_file is not None:
                shutil.copyfile(settings.site_file, target / SITE_FILE)
            runtime = verified_runtime(self.settings_for(number, settings))
        except BaseException:
            shutil.rmtree(target, ignore_errors=True)
            raise
        return Published(number, _identity(runtime))

    def ask(self, number: int) -> None:
        """Say which generation the workers are to prepare (read on ``SIGHUP``)."""
        pending = self.root / "pending"
        pending.with_suffix(".tmp").write_text(str(number))
        pending.with_suffix(".tmp").replace(pending)

    def reports(self, number: int) -> dict[int, str]:
        """Worker pid → ``ready`` or the reason it could not load generation ``number``."""
        found: dict[int, str] = {}
        for path in (self.root / str(number)).glob("worker-*.json"):
            try:
                report = json.loads(path.read_text())
            except (OSError, ValueError):
                continue  # being written
            found[int(report["pid"])] = str(report["state"])
        return found

    def commit(self, number: int) -> None:
        """Every new request of every worker is answered by generation ``number`` from now."""
        _FLAG.pack_into(self._view, 0, number, number ^ _MASK)
        self.committed = number
        for old in self.root.iterdir():  # keep this one and the one before
            if old.name.isdigit() and int(old.name) < number - 1:
                shutil.rmtree(old, ignore_errors=True)

    def close(self) -> None:
        self._view.close()
        self._file.close()
        shutil.rmtree(self.root, ignore_errors=True)


def settings_for(root: Path, number: int, base: Settings) -> Settings:
    """``base`` with the rule directory and site file of generation ``number`` under ``root``."""
    site = root / str(number) / SITE_FILE
    return base.model_copy(
        update={
            "rules_dir": root / str(number) / "rules",
            "site_file": site if site.exists() else None,
        }
    )


class WorkerGenerations:
    """A worker's side: which generation is committed, loading one, reporting back."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self._file = (root / FLAG_FILE).open("rb")
        self._view = mmap.mmap(self._file.fileno(), _FLAG.size, access=mmap.ACCESS_READ)

    def committed(self) -> int:
        """The committed generation (a read of shared memory: cheap enough per request)."""
        return _read_flag(self._view)

    def pending(self) -> int | None:
        try:
            return int((self.root / "pending").read_text())
        except (OSError, ValueError):
            return None

    def load(self, number: int, base: Settings) -> Runtime:
        """Generation ``number``, verified as lint does."""
        return verified_runtime(settings_for(self.root, number, base))

    def report(self, number: int, state: str) -> None:
        """Tell the supervisor this worker is ready for generation ``number``, or why not."""
        path = self.root / str(number) / f"worker-{os.getpid()}.json"
        temporary = path.with_suffix(".tmp")
        temporary.write_text(json.dumps({"pid": os.getpid(), "state": state}))
        temporary.replace(path)


__all__ = ["STATE_VARIABLE", "Generations", "Published", "WorkerGenerations", "settings_for"]
