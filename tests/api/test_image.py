"""What the Dockerfile's steps do, done here without a Docker engine (marked ``slow``).

Build the wheel, install it with no pip into a fresh virtual environment (as the final stage
does), start ``oxyrule serve`` from it as an unprivileged user when the machine allows, assess
a fixture, and run the Dockerfile's own HEALTHCHECK command against it. The wheel's third-party
dependencies are taken from the test environment (a ``.pth`` line) rather than downloaded: what
is under test is the wheel itself (code, bundled rules, entry point), not the package index.
"""

from __future__ import annotations

import json
import os
import shutil
import stat
import subprocess
import sys
import sysconfig
import tempfile
import urllib.request
from collections.abc import Iterator
from pathlib import Path

import pytest

from tests.api.conftest import ALTITUDE, ROOT
from tests.api.test_deploy import healthcheck_command
from tests.api.test_serve import environment, free_port, wait_ready

pytestmark = pytest.mark.slow
NOBODY = 65534


def _hatchling_present() -> bool:
    try:
        import hatchling  # type: ignore[import-not-found]  # noqa: F401
    except ImportError:
        return False
    return True


def world_readable(path: Path) -> bool:
    """Whether any user can reach ``path`` (every directory on the way is o+x, itself o+r)."""
    path = path.resolve()
    if not path.stat().st_mode & stat.S_IROTH:
        return False
    return all(p.stat().st_mode & stat.S_IXOTH for p in path.parents)


def base_interpreter() -> str:
    """This Python, or the system's of the same version when others may not run this one."""
    if world_readable(Path(sys.executable).resolve()):
        return sys.executable
    system = Path(f"/usr/bin/python{sys.version_info[0]}.{sys.version_info[1]}")
    return str(system) if system.is_file() and world_readable(system) else sys.executable


@pytest.fixture(scope="module")
def installed() -> Iterator[Path]:
    """A fresh, pip-less virtual environment holding only the oxyrule wheel."""
    work = Path(tempfile.mkdtemp(prefix="oxyrule-image-"))
    work.chmod(0o755)
    wheels = work / "wheels"
    build = [sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "--wheel-dir", str(wheels)]
    if _hatchling_present():
        build.append("--no-build-isolation")
    subprocess.run([*build, str(ROOT)], check=True, timeout=300)
    wheel = next(wheels.glob("oxyrule-*.whl"))
    venv = work / "venv"
    subprocess.run([base_interpreter(), "-m", "venv", "--without-pip", str(venv)], check=True)
    python = venv / "bin" / "python"
    install = [sys.executable, "-m", "pip", "--python", str(python), "install", "-q"]
    subprocess.run([*install, "--no-deps", "--no-index", str(wheel)], check=True, timeout=300)
    purelib = subprocess.run(
        [str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout.strip()
    dependencies = sysconfig.get_paths()["purelib"]
    (Path(purelib) / "test-dependencies.pth").write_text(dependencies + "\n")
    for path in work.rglob("*"):
        path.chmod(path.stat().st_mode | stat.S_IROTH | (stat.S_IXOTH if path.is_dir() else 0))
    try:
        yield venv
    finally:
        shutil.rmtree(work, ignore_errors=True)


def test_the_wheel_carries_the_code_and_the_rule_set(installed: Path) -> None:
    code = (
        "import json, service, service.config as c; "
        "print(json.dumps([service.__file__, str(c.default_rules_dir())]))"
    )
    done = subprocess.run(
        [str(installed / "bin" / "python"), "-c", code],
        capture_output=True,
        text=True,
        check=True,
        cwd=installed,
        env=environment(),
    )
    module, rules = json.loads(done.stdout)
    assert module.startswith(str(installed)), module
    assert rules.startswith(str(installed)) and rules.endswith("_bundled/rules")
    assert (Path(rules) / "ruleset.yaml").is_file()
    # The rule set's fixtures travel beside it (the bench's fixture panel, `oxyrule test`).
    assert (Path(rules).parent / "fixtures" / "demo" / "altitude-visitor.bundle.json").is_file()
    assert not (installed / "bin" / "pip").exists()


@pytest.mark.parametrize("as_nobody", [False, True], ids=["as-current-user", "as-nobody"])
def test_serve_from_the_installed_wheel_answers_and_passes_the_healthcheck(
    installed: Path, as_nobody: bool
) -> None:
    python = (installed / "bin" / "python").resolve()
    reachable = (Path(sysconfig.get_paths()["purelib"]), python)
    if as_nobody and not (os.geteuid() == 0 and all(world_readable(p) for p in reachable)):
        pytest.skip("needs root, and an interpreter and dependencies that others may read")
    port = free_port()
    process = subprocess.Popen(
        [str(installed / "bin" / "oxyrule"), "serve", "--port", str(port)],
        cwd=installed,
        env=environment(HOME="/nonexistent"),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        user=NOBODY if as_nobody else None,
        group=NOBODY if as_nobody else None,
        extra_groups=[] if as_nobody else None,
    )
    try:
        wait_ready(port, process)
        status = Path(f"/proc/{process.pid}/status")
        if as_nobody and status.exists():
            uid_line = next(x for x in status.read_text().splitlines() if x.startswith("Uid:"))
            assert uid_line.split()[1:] == [str(NOBODY)] * 4
        request = urllib.request.Request(
            f"http://127.0.0.1:{port}/fhir/$assess-hypoxaemia",
            ALTITUDE.read_bytes(),
            {"Content-Type": "application/fhir+json"},
        )
        for path in ("/bench", "/bench/static/bench.js", "/bench/static/bench.css"):
            with urllib.request.urlopen(f"http://127.0.0.1:{port}{path}", timeout=10) as page:
                assert page.status == 200, path  # the bench's files are in the wheel
        with urllib.request.urlopen(request, timeout=10) as answer:
            assert json.loads(answer.read())["resourceType"] == "Bundle"
        health = [str(installed / "bin" / "python"), *healthcheck_command()[1:]]
        env = environment(OXYRULE_PORT=str(port))
        assert subprocess.run(health, env=env, timeout=10, check=False).returncode == 0
    finally:
        process.terminate()
        _, stderr = process.communicate(timeout=15)
    assert b"Traceback" not in stderr
    assert subprocess.run(health, env=env, timeout=10, capture_output=True).returncode != 0
