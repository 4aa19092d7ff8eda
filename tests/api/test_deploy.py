"""The container and Kubernetes files: structure checked without a Docker engine or a cluster."""

from __future__ import annotations

import importlib.util
import re
import shlex
from pathlib import Path
from types import ModuleType
from typing import Any

import pytest
import yaml

from service.api.budget import worst_case_bytes
from service.assess.catalogue import DEFAULT_CATALOGUE
from service.config import ServerSettings, Settings
from service.engine import load_ruleset
from service.workbench.lint import verified_runtime
from tests.api.conftest import ROOT

DOCKER = ROOT / "docker"
DEPLOY = ROOT / "deploy"


def load(name: str) -> dict[str, Any]:
    document: dict[str, Any] = yaml.safe_load((DEPLOY / name).read_text())
    return document


def configmap_module() -> ModuleType:
    spec = importlib.util.spec_from_file_location("rules_configmap", DEPLOY / "rules_configmap.py")
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def container() -> dict[str, Any]:
    found: dict[str, Any] = load("deployment.yaml")["spec"]["template"]["spec"]["containers"][0]
    return found


def env(name: str) -> str:
    value: str = next(e["value"] for e in container()["env"] if e["name"] == name)
    return value


def test_deployment_labels_select_its_pods_and_the_service_selects_them_too() -> None:
    deployment, service = load("deployment.yaml"), load("service.yaml")
    pod_labels = deployment["spec"]["template"]["metadata"]["labels"]
    selector = deployment["spec"]["selector"]["matchLabels"]
    assert selector.items() <= pod_labels.items()
    assert service["spec"]["selector"].items() <= pod_labels.items()


def test_probes_and_ports_name_the_service_endpoints() -> None:
    spec = container()
    port = spec["ports"][0]
    assert port["name"] == "http"
    assert port["containerPort"] == int(env("OXYRULE_PORT"))
    assert spec["readinessProbe"]["httpGet"] == {"path": "/readyz", "port": "http"}
    assert spec["livenessProbe"]["httpGet"] == {"path": "/healthz", "port": "http"}
    assert spec["startupProbe"]["httpGet"]["path"] == "/healthz"
    assert load("service.yaml")["spec"]["ports"][0]["targetPort"] == "http"
    assert env("OXYRULE_HOST") == "0.0.0.0"
    assert env("OXYRULE_WORKERS") == "1"  # metrics are per process: scale with pods


def test_resources_have_requests_within_limits() -> None:
    resources = container()["resources"]
    assert set(resources) == {"requests", "limits"}
    assert _millicores(resources["requests"]["cpu"]) <= _millicores(resources["limits"]["cpu"])
    assert _mebibytes(resources["requests"]["memory"]) <= _mebibytes(resources["limits"]["memory"])
    assert _mebibytes(resources["requests"]["memory"]) >= 64  # measured ~50-60 MB per worker


def test_the_memory_limit_holds_a_worker_with_every_budget_full_and_room_to_spare() -> None:
    # Every budget of the settings the pod runs with, full at once (service.api.budget), must
    # fit the limit with a third to spare; measured under the amplification attack, a worker
    # peaked well below that (tests/load/hostile.py).
    settings = {
        e["name"].removeprefix("OXYRULE_").lower(): e["value"]
        for e in container()["env"]
        if e["name"].startswith("OXYRULE_") and "value" in e
    }
    server = ServerSettings(
        **{k: v for k, v in settings.items() if k in ServerSettings.model_fields}
    )
    worst = worst_case_bytes(server) / 2**20
    limit = _mebibytes(container()["resources"]["limits"]["memory"])
    assert worst * 1.5 <= limit, (worst, limit)


def _millicores(text: str) -> float:
    return float(text[:-1]) if text.endswith("m") else float(text) * 1000


def _mebibytes(text: str) -> float:
    match = re.fullmatch(r"(\d+)(Mi|Gi)", text)
    assert match, text
    return float(match[1]) * (1024 if match[2] == "Gi" else 1)


def test_pods_run_unprivileged_with_a_read_only_root() -> None:
    pod = load("deployment.yaml")["spec"]["template"]["spec"]
    assert pod["securityContext"]["runAsNonRoot"] is True
    assert pod["securityContext"]["runAsUser"] != 0
    assert pod["automountServiceAccountToken"] is False
    # A Service named oxyrule would otherwise inject OXYRULE_PORT=tcp://... into the pod.
    assert pod["enableServiceLinks"] is False
    security = container()["securityContext"]
    assert security["readOnlyRootFilesystem"] is True
    assert security["allowPrivilegeEscalation"] is False
    assert security["capabilities"]["drop"] == ["ALL"]


def test_the_hpa_scales_the_deployment() -> None:
    hpa, deployment = load("hpa.yaml"), load("deployment.yaml")
    target = hpa["spec"]["scaleTargetRef"]
    assert (target["kind"], target["name"]) == ("Deployment", deployment["metadata"]["name"])
    assert 1 <= hpa["spec"]["minReplicas"] <= hpa["spec"]["maxReplicas"]


def test_kustomization_lists_every_manifest() -> None:
    listed = load("kustomization.yaml")["resources"]
    assert set(listed) == {"configmap-rules.yaml", "deployment.yaml", "service.yaml", "hpa.yaml"}
    assert "configmap-rules.yaml" in (DEPLOY / ".gitignore").read_text()


def test_the_generated_rules_configmap_is_mounted_where_the_service_reads_rules(
    tmp_path: Path,
) -> None:
    text = configmap_module().render(ROOT / "rules")
    configmap = yaml.safe_load(text)
    assert configmap["kind"] == "ConfigMap"
    pod = load("deployment.yaml")["spec"]["template"]["spec"]
    volume = next(v for v in pod["volumes"] if v.get("configMap"))
    assert volume["configMap"]["name"] == configmap["metadata"]["name"]
    mount = next(m for m in container()["volumeMounts"] if m["name"] == volume["name"])
    assert mount["mountPath"] == env("OXYRULE_RULES_DIR")
    assert all(re.fullmatch(r"[-._a-zA-Z0-9]+", key) for key in configmap["data"])
    # What the pod would see: the files, flat, in one directory. It must load as the same set.
    for key, body in configmap["data"].items():
        (tmp_path / key).write_text(body)
    flat, original = (
        load_ruleset(tmp_path, catalogue=DEFAULT_CATALOGUE),
        load_ruleset(ROOT / "rules", catalogue=DEFAULT_CATALOGUE),
    )
    assert (flat.id, flat.version, len(flat.rules)) == (
        original.id,
        original.version,
        len(original.rules),
    )
    assert configmap["metadata"]["annotations"]["oxyrule.org/ruleset"] == (
        f"{original.id}|{original.version}"
    )
    # And it passes the checks the service runs before it serves a set (those of lint, the
    # lock file among them): without the lock in the ConfigMap the pod would not start.
    assert verified_runtime(Settings(rules_dir=tmp_path)).ruleset.version == original.version


def test_the_configmap_script_refuses_two_files_with_one_name(tmp_path: Path) -> None:
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    for folder in ("a", "b"):
        (tmp_path / folder / "same.yaml").write_text("id: same\n")
    (tmp_path / "ruleset.yaml").write_text("id: x\nversion: 1.0.0\n")
    with pytest.raises(SystemExit, match=r"same\.yaml"):
        configmap_module().rule_files(tmp_path)


def dockerfile_stages() -> list[list[str]]:
    """The Dockerfile's instructions (continuations joined), split into stages."""
    text = (DOCKER / "Dockerfile").read_text().replace("\\\n", " ")
    stages: list[list[str]] = []
    for line in text.splitlines():
        line = line.strip()
        if not line or line.startswith("#"):
            continue
        if line.upper().startswith("FROM "):
            stages.append([])
        stages[-1].append(line)
    return stages


def healthcheck_command() -> list[str]:
    final = dockerfile_stages()[-1]
    line = next(i for i in final if i.startswith("HEALTHCHECK"))
    command: list[str] = yaml.safe_load(line.split(" CMD ", 1)[1])  # exec form is JSON
    return command


def test_the_dockerfile_builds_a_wheel_then_installs_it_clean_as_an_unprivileged_user() -> None:
    build, final = dockerfile_stages()
    assert build[0] == "FROM python:3.11-slim AS build"
    assert final[0] == "FROM python:3.11-slim"
    assert any("pip wheel" in line for line in build)
    run = " ".join(line for line in final if line.startswith("RUN"))
    assert "venv --without-pip" in run and "--no-index" in run
    assert not re.search(r"apt-get|gcc|build-essential|curl|wget", run)
    user = next(line for line in final if line.startswith("USER")).split()[1]
    assert user.split(":")[0] not in ("0", "root")
    assert "COPY --from=build /wheels /tmp/wheels" in final
    assert any(line.startswith("EXPOSE 8080") for line in final)
    assert "OXYRULE_PORT=8080" in " ".join(final)
    assert final[-2:] == ['ENTRYPOINT ["oxyrule"]', 'CMD ["serve"]']


def test_the_healthcheck_uses_python_urllib_on_healthz() -> None:
    command = healthcheck_command()
    assert command[:2] == ["python", "-c"]
    assert "urllib.request" in command[2] and "/healthz" in command[2]
    assert "curl" not in shlex.join(command)


def test_compose_builds_the_dockerfile_and_publishes_on_loopback() -> None:
    compose = yaml.safe_load((DOCKER / "compose.yaml").read_text())
    service = compose["services"]["oxyrule"]
    assert (DOCKER / service["build"]["context"] / service["build"]["dockerfile"]).is_file()
    assert service["ports"] == ["127.0.0.1:8080:8080"]
    assert service["read_only"] is True
