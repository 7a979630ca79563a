"""Compose file and Kubernetes manifests: they parse, reference each other correctly, probe
real routes of the app and run real `riskfit` commands. (No container engine or cluster runs
here; the checks are on the files and on the installed command line.)"""

from __future__ import annotations

import re
import shlex
import shutil
import subprocess
from collections.abc import Iterator
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import httpx
import pytest
import yaml

from service.cli import build_parser
from service.config import Settings
from tests.deploy._commands import DEPLOY, REPO, check_riskfit_argv, subcommands

K8S = DEPLOY / "k8s"


def _compose() -> dict[str, Any]:
    data: dict[str, Any] = yaml.safe_load((DEPLOY / "compose.yaml").read_text())
    return data


def _manifests() -> list[dict[str, Any]]:
    docs: list[dict[str, Any]] = []
    for path in sorted(K8S.glob("*.yaml")):
        if path.name != "kustomization.yaml":
            docs.extend(d for d in yaml.safe_load_all(path.read_text()) if d)
    return docs


def _one(kind: str) -> dict[str, Any]:
    found = [d for d in _manifests() if d["kind"] == kind]
    assert len(found) == 1, f"expected one {kind}, found {len(found)}"
    return found[0]


def _pod_specs() -> Iterator[tuple[str, dict[str, Any]]]:
    yield "Deployment", _one("Deployment")["spec"]["template"]["spec"]
    yield "CronJob", _one("CronJob")["spec"]["jobTemplate"]["spec"]["template"]["spec"]


def _containers() -> Iterator[tuple[str, dict[str, Any]]]:
    for owner, pod in _pod_specs():
        for c in pod.get("initContainers", []) + pod["containers"]:
            yield f"{owner}/{c['name']}", c


def _known_env_names() -> set[str]:
    """RISKFIT_* names the product reads: Settings fields, or names the CLI sources mention."""
    names = {f"RISKFIT_{field.upper()}" for field in Settings.model_fields}
    cli_source = "\n".join(p.read_text() for p in (REPO / "service" / "cli").glob("*.py"))
    return names | _riskfit_words(cli_source)


def _riskfit_words(text: str) -> set[str]:
    return set(re.findall(r"RISKFIT_[A-Z0-9_]+", text))


def _interpolate(text: str, env: dict[str, str]) -> str:
    """Compose's ``${VAR}``, ``${VAR:?message}``, ``${VAR:-default}`` with ``env`` set."""
    return re.sub(r"\$\{([A-Za-z_][A-Za-z0-9_]*)(?::?[?-][^}]*)?\}", lambda m: env[m[1]], text)


# --- compose -----------------------------------------------------------------------------------


def test_compose_runs_the_service_on_a_health_checked_postgres_16() -> None:
    compose = _compose()
    services = compose["services"]
    db, app = services["db"], services["riskfit"]
    assert db["image"].startswith("postgres:16")
    assert db["healthcheck"]["test"] and "pg_isready" in " ".join(db["healthcheck"]["test"])
    volume = db["volumes"][0].split(":")[0]
    assert volume in compose["volumes"], "the database volume is declared at the top level"
    assert app["depends_on"]["db"]["condition"] == "service_healthy"
    assert (
        app["image"] and (DEPLOY / app["build"]["context"] / app["build"]["dockerfile"]).is_file()
    )
    assert app["ports"] == ["127.0.0.1:8000:8000"]


def test_compose_database_url_points_at_the_db_service() -> None:
    compose = _compose()
    db_env = compose["services"]["db"]["environment"]
    url = compose["services"]["riskfit"]["environment"]["RISKFIT_DATABASE_URL"]
    parts = urlsplit(_interpolate(url, {"RISKFIT_DB_PASSWORD": "pw"}))
    assert parts.scheme == "postgresql+psycopg"
    assert parts.hostname == "db" and parts.port == 5432
    assert parts.username == db_env["POSTGRES_USER"]
    assert parts.path.lstrip("/") == db_env["POSTGRES_DB"]
    # the password is the same variable on both sides, never written into the file
    assert "${RISKFIT_DB_PASSWORD" in db_env["POSTGRES_PASSWORD"]
    assert "${RISKFIT_DB_PASSWORD" in url
    assert parts.password == "pw"
    assert set(compose["services"]["riskfit"]["environment"]) <= _known_env_names()


# --- Kubernetes ---------------------------------------------------------------------------------


def test_manifests_hold_the_required_kinds() -> None:
    kinds = sorted(d["kind"] for d in _manifests())
    assert kinds == ["ConfigMap", "CronJob", "Deployment", "Secret", "Service"]
    for doc in _manifests():
        assert doc["apiVersion"] and doc["metadata"]["name"]


def test_kustomization_lists_every_manifest() -> None:
    kustomization = yaml.safe_load((K8S / "kustomization.yaml").read_text())
    files = {p.name for p in K8S.glob("*.yaml")} - {"kustomization.yaml"}
    assert sorted(kustomization["resources"]) == sorted(files)


@pytest.mark.skipif(shutil.which("kubectl") is None, reason="kubectl is not installed")
def test_kubectl_kustomize_builds_the_manifests() -> None:
    # kubectl's own parser (client side, no cluster needed)
    out = subprocess.run(
        ["kubectl", "kustomize", str(K8S)], capture_output=True, text=True, timeout=60, check=False
    )
    assert out.returncode == 0, out.stderr
    assert len(list(yaml.safe_load_all(out.stdout))) == 5


def test_probes_hit_real_routes(get_routes: set[str], app_client: httpx.Client) -> None:
    container = _one("Deployment")["spec"]["template"]["spec"]["containers"][0]
    ready, live = container["readinessProbe"]["httpGet"], container["livenessProbe"]["httpGet"]
    assert (ready["path"], live["path"]) == ("/readyz", "/healthz")
    assert {ready["path"], live["path"]} <= get_routes
    for path in (ready["path"], live["path"]):
        assert app_client.get(path).status_code == 200, path
    port_names = {p["name"] for p in container["ports"]}
    assert {ready["port"], live["port"]} <= port_names


def test_service_selects_the_deployment_pods_on_the_container_port() -> None:
    deployment, service = _one("Deployment"), _one("Service")
    pod_labels = deployment["spec"]["template"]["metadata"]["labels"]
    assert deployment["spec"]["selector"]["matchLabels"].items() <= pod_labels.items()
    assert service["spec"]["selector"].items() <= pod_labels.items()
    container_ports = {p["name"]: p["containerPort"] for p in _containers_of_deployment()}
    for port in service["spec"]["ports"]:
        assert port["targetPort"] in container_ports


def _containers_of_deployment() -> list[dict[str, Any]]:
    ports: list[dict[str, Any]] = _one("Deployment")["spec"]["template"]["spec"]["containers"][0][
        "ports"
    ]
    return ports


def test_cronjob_reaches_the_service_by_its_name() -> None:
    url = urlsplit(_one("ConfigMap")["data"]["RISKFIT_URL"])
    service = _one("Service")
    assert url.hostname == service["metadata"]["name"]
    assert url.port in {p["port"] for p in service["spec"]["ports"]}
    cron = _one("CronJob")["spec"]
    assert cron["concurrencyPolicy"] == "Forbid"
    assert len(cron["schedule"].split()) == 5


def test_env_references_resolve_to_the_secret_and_configmap() -> None:
    secret, config = _one("Secret"), _one("ConfigMap")
    for where, c in _containers():
        for ref in c.get("envFrom", []):
            assert ref["configMapRef"]["name"] == config["metadata"]["name"], where
        for var in c.get("env", []):
            key_ref = var["valueFrom"]["secretKeyRef"]
            assert key_ref["name"] == secret["metadata"]["name"], where
            assert key_ref["key"] in secret["stringData"], where
    assert set(secret["stringData"]) | set(config["data"]) <= _known_env_names()
    assert urlsplit(secret["stringData"]["RISKFIT_DATABASE_URL"]).scheme == "postgresql+psycopg"


def test_pods_run_as_the_image_user_without_privileges() -> None:
    for owner, pod in _pod_specs():
        assert pod["securityContext"]["runAsNonRoot"] is True, owner
        assert pod["securityContext"]["runAsUser"] != 0, owner
    for where, c in _containers():
        assert c["securityContext"]["allowPrivilegeEscalation"] is False, where
        assert c["image"] == "riskfit:0.1.0", where


@pytest.mark.parametrize("where", ["Deployment/migrate", "Deployment/riskfit", "CronJob/refit"])
def test_container_commands_are_real_riskfit_commands(where: str) -> None:
    containers = dict(_containers())
    check_riskfit_argv(containers[where]["command"], where)


def test_the_paths_these_files_name_exist() -> None:
    assert (REPO / "Dockerfile").is_file()
    assert Path(DEPLOY / "README.md").is_file()


def _riskfit_commands(line: str, names: set[str]) -> list[list[str]]:
    """``riskfit SUB ...`` argv lists in a shell line (inside ``sh -c '...'`` too)."""
    lexer = shlex.shlex(line, posix=True, punctuation_chars=True)
    lexer.whitespace_split = True
    tokens = list(lexer)
    found: list[list[str]] = []
    for i, token in enumerate(tokens):
        if " " in token:
            found.extend(_riskfit_commands(token, names))
        elif Path(token).name == "riskfit" and i + 1 < len(tokens) and tokens[i + 1] in names:
            argv = [token]
            for rest in tokens[i + 1 :]:
                if rest and set(rest) <= set(";&|()<>"):
                    break
                argv.append(rest)
            found.append(argv)
    return found


def test_readme_commands_are_real_riskfit_commands() -> None:
    text = (DEPLOY / "README.md").read_text()
    blocks = re.findall(r"```sh\n(.*?)```", text, flags=re.S)
    lines = [ln for b in blocks for ln in b.splitlines() if ln and not ln.startswith("#")]
    names = set(subcommands(build_parser()))
    commands = [argv for line in lines for argv in _riskfit_commands(line, names)]
    assert len(commands) >= 4, commands
    for argv in commands:
        check_riskfit_argv(argv, f"deploy/README.md: {shlex.join(argv)}")
