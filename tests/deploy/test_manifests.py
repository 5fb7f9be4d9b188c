"""Checks of the deployment files under deploy/: the Containerfile, compose.yaml and the
Kubernetes manifests, read as text and YAML, for the shape each of them must have to work,
and against the binary under test, that every flag and MIXGAUGE_* variable they use exists
and that the autoscaler's queue query runs on the schema the binary creates.

    python -m pytest tests/deploy          (packages: tests/deploy/requirements.txt)

The two checks against the binary use ``$MIXGAUGE_BIN`` and are skipped, saying so, when it is
unset. The queue-query check also needs a PostgreSQL server where it may create and drop a
database (``$MIXGAUGE_TEST_POSTGRES``, default ``postgres://postgres@127.0.0.1:5432/postgres``)
and ``psql``. Nothing here builds an image, starts a container or talks to a cluster.
"""

from __future__ import annotations

import os
import re
import shlex
import signal
import socket
import subprocess
import time
import urllib.error
import urllib.request
import uuid
from pathlib import Path
from urllib.parse import urlsplit, urlunsplit

import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]
DEPLOY = REPO / "deploy"
KUBE = DEPLOY / "kubernetes"
CONTAINERFILE = DEPLOY / "Containerfile"
COMPOSE = DEPLOY / "compose.yaml"
#: `mixgauge worker --lease` when neither the flag nor MIXGAUGE_LEASE is given (seconds).
DEFAULT_LEASE = 30.0


# ---- reading the files ---------------------------------------------------------------------


def documents(path: Path) -> list[dict]:
    """The YAML documents of one file (empty ones dropped)."""
    return [d for d in yaml.safe_load_all(path.read_text()) if d is not None]


def manifests() -> list[dict]:
    """Every Kubernetes object under deploy/kubernetes/ (the kustomization is not one)."""
    return [
        doc
        for path in sorted(KUBE.glob("*.yaml"))
        if path.name != "kustomization.yaml"
        for doc in documents(path)
    ]


def container(deployment: dict) -> dict:
    """The one container of a Deployment's pods."""
    found = deployment["spec"]["template"]["spec"]["containers"]
    assert len(found) == 1, f"{deployment['metadata']['name']}: expected one container"
    return found[0]


def arguments(c: dict) -> list[str]:
    """mixgauge's arguments in a container: its `args`, after the image's ENTRYPOINT."""
    assert "command" not in c, f"{c['name']}: `command` would replace the image's entrypoint"
    return [str(a) for a in c.get("args", [])]


def deployment_running(subcommand: str) -> dict:
    """The one Deployment whose container runs `mixgauge SUBCOMMAND`."""
    found = [d for d in manifests() if d["kind"] == "Deployment"
             and arguments(container(d))[:1] == [subcommand]]
    assert len(found) == 1, f"expected one Deployment running `mixgauge {subcommand}`"
    return found[0]


def flag(args: list[str], name: str) -> str | None:
    """The value given to ``--name`` (as ``--name VALUE`` or ``--name=VALUE``), or None."""
    for i, a in enumerate(args):
        if a == name:
            assert i + 1 < len(args), f"{name} has no value"
            return args[i + 1]
        if a.startswith(name + "="):
            return a.split("=", 1)[1]
    return None


def kube_env(c: dict) -> dict[str, dict]:
    """A container's environment entries by name."""
    return {e["name"]: e for e in c.get("env", [])}


def container_port(c: dict, port) -> int:
    """The containerPort a probe or Service port (a number or a port name) refers to; fails
    when the container declares no such port."""
    declared = {p.get("name"): p["containerPort"] for p in c.get("ports", [])}
    if isinstance(port, int):
        assert port in declared.values(), f"{c['name']}: port {port} is not declared"
        return port
    assert port in declared, f"{c['name']}: no port named {port!r}"
    return declared[port]


def listen_port(address: str) -> int:
    """The port of HOST:PORT; the host must not be a loopback one (probes come from outside)."""
    host, port = address.rsplit(":", 1)
    assert not host.startswith("127.") and host != "localhost", f"{address} is loopback-only"
    return int(port)


def store_secret(c: dict) -> tuple[str, str]:
    """(Secret name, key) the container's MIXGAUGE_STORE comes from: given either as the
    variable itself or as ``--store $(MIXGAUGE_STORE)``, never as a literal URL."""
    given = flag(arguments(c), "--store")
    assert given in (None, "$(MIXGAUGE_STORE)"), "the store URL (with its password) is in args"
    ref = kube_env(c).get("MIXGAUGE_STORE", {}).get("valueFrom", {}).get("secretKeyRef")
    assert ref, f"{c['name']}: MIXGAUGE_STORE does not come from a Secret"
    return ref["name"], ref["key"]


def example_secret(name: str) -> dict:
    """A Secret defined in one of the *.example.yaml files."""
    found = [d for p in KUBE.glob("*.example.yaml") for d in documents(p)
             if d["kind"] == "Secret" and d["metadata"]["name"] == name]
    assert len(found) == 1, f"no example of the Secret {name!r}"
    return found[0]


def compose() -> dict:
    return yaml.safe_load(COMPOSE.read_text())


def compose_command(service: dict) -> list[str]:
    assert "entrypoint" not in service, "an entrypoint would replace the image's mixgauge"
    command = service.get("command", [])
    return shlex.split(command) if isinstance(command, str) else [str(a) for a in command]


def compose_services(subcommand: str) -> list[dict]:
    return [s for s in compose()["services"].values()
            if compose_command(s)[:1] == [subcommand]]


def compose_env(service: dict) -> dict[str, str]:
    """A service's environment, with ``${VAR:-default}`` replaced by its default."""
    env = service.get("environment", {})
    if isinstance(env, list):
        env = dict(item.split("=", 1) for item in env)
    return {k: re.sub(r"\$\{\w+:-([^}]*)\}", r"\1", str(v)) for k, v in env.items()}


def seconds(duration) -> float:
    """A compose duration (``45s``, ``1m30s``) or a plain number, in seconds."""
    if isinstance(duration, (int, float)):
        return float(duration)
    units = {"h": 3600, "m": 60, "s": 1, "ms": 0.001}
    parts = re.findall(r"(\d+(?:\.\d+)?)(ms|h|m|s)", duration)
    assert parts and "".join(n + u for n, u in parts) == duration, f"bad duration {duration!r}"
    return sum(float(n) * units[u] for n, u in parts)


def lease(args: list[str], env_value: str | None) -> float:
    """The worker's lease in seconds: --lease, else MIXGAUGE_LEASE, else the default."""
    return float(flag(args, "--lease") or env_value or DEFAULT_LEASE)


def containerfile_instructions() -> list[tuple[str, str]]:
    """(INSTRUCTION, rest) of the Containerfile, continuation lines joined, comments out."""
    lines = [l for l in CONTAINERFILE.read_text().splitlines() if not l.lstrip().startswith("#")]
    text = re.sub(r"\\\n", " ", "\n".join(lines))
    return [(l.split(None, 1)[0].upper(), l.split(None, 1)[1] if " " in l.strip() else "")
            for l in (x.strip() for x in text.splitlines()) if l]


def final_stage() -> list[tuple[str, str]]:
    """The instructions from the last FROM on."""
    steps = containerfile_instructions()
    last = max(i for i, (op, _) in enumerate(steps) if op == "FROM")
    return steps[last:]


# ---- every file ----------------------------------------------------------------------------


@pytest.mark.parametrize(
    "path", sorted(DEPLOY.rglob("*.y*ml")), ids=lambda p: str(p.relative_to(DEPLOY))
)
def test_yaml_parses_and_kubernetes_objects_name_no_namespace(path: Path):
    docs = documents(path)
    assert docs, f"{path} holds no YAML document"
    if path.parent == KUBE and path.name != "kustomization.yaml":
        for doc in docs:
            assert doc.get("apiVersion") and doc.get("kind") and doc["metadata"].get("name")
            assert "namespace" not in doc["metadata"], "the manifests must suit any namespace"


def test_kustomization_lists_every_manifest_but_the_examples():
    kustomization = yaml.safe_load((KUBE / "kustomization.yaml").read_text())
    expected = {p.name for p in KUBE.glob("*.yaml")
                if p.name != "kustomization.yaml" and not p.name.endswith(".example.yaml")}
    assert set(kustomization["resources"]) == expected
    renamed = {i["name"] for i in kustomization.get("images", [])}
    used = {container(d)["image"] for d in manifests() if d["kind"] == "Deployment"}
    assert used <= renamed, "every Deployment's image must be set by the kustomization"


# ---- Kubernetes ----------------------------------------------------------------------------


def test_every_deployment_probes_health_and_readiness_on_a_declared_port():
    deployments = [d for d in manifests() if d["kind"] == "Deployment"]
    assert len(deployments) == 2
    for d in deployments:
        c = container(d)
        for probe, path in (("livenessProbe", "/healthz"), ("readinessProbe", "/readyz")):
            assert probe in c, f"{d['metadata']['name']} has no {probe}"
            assert c[probe]["httpGet"]["path"] == path
            container_port(c, c[probe]["httpGet"]["port"])


def test_processes_listen_on_the_port_their_probes_ask():
    for subcommand, option in (("serve", "--listen"), ("worker", "--health-listen")):
        c = container(deployment_running(subcommand))
        address = flag(arguments(c), option)
        assert address, f"`mixgauge {subcommand}` in Kubernetes is given no {option}"
        for probe in ("livenessProbe", "readinessProbe"):
            assert container_port(c, c[probe]["httpGet"]["port"]) == listen_port(address)


def test_the_service_sends_traffic_to_the_api_only():
    api = deployment_running("serve")
    worker = deployment_running("worker")
    services = [d for d in manifests() if d["kind"] == "Service"]
    assert len(services) == 1
    selector = services[0]["spec"]["selector"].items()
    assert selector <= api["spec"]["template"]["metadata"]["labels"].items()
    assert not selector <= worker["spec"]["template"]["metadata"]["labels"].items()
    for port in services[0]["spec"]["ports"]:
        container_port(container(api), port["targetPort"])


def test_the_api_fits_nothing_and_takes_the_store_from_the_example_secret():
    c = container(deployment_running("serve"))
    assert flag(arguments(c), "--workers") == "0"
    name, key = store_secret(c)
    secret = example_secret(name)
    assert key in secret.get("stringData", {}), f"the example {name} has no stringData.{key}"
    assert secret["stringData"][key].startswith("postgres://")
    for entry in kube_env(c).values():
        ref = entry.get("valueFrom", {}).get("secretKeyRef")
        if ref:
            assert ref["key"] in example_secret(ref["name"]).get("stringData", {})


def test_the_worker_runs_worker_on_the_same_store():
    api = container(deployment_running("serve"))
    worker = container(deployment_running("worker"))
    assert store_secret(worker) == store_secret(api)


def test_the_worker_grace_period_outlasts_its_lease():
    d = deployment_running("worker")
    c = container(d)
    env = kube_env(c).get("MIXGAUGE_LEASE", {}).get("value")
    grace = d["spec"]["template"]["spec"].get("terminationGracePeriodSeconds", 30)
    assert grace > lease(arguments(c), env)


def test_worker_count_is_left_to_the_autoscaler():
    assert "replicas" not in deployment_running("worker")["spec"]


def test_api_and_workers_share_one_read_write_many_blobs_volume():
    claims = [d for d in manifests() if d["kind"] == "PersistentVolumeClaim"]
    assert len(claims) == 1 and "ReadWriteMany" in claims[0]["spec"]["accessModes"]
    locations = set()
    for subcommand in ("serve", "worker"):
        d = deployment_running(subcommand)
        c = container(d)
        location = flag(arguments(c), "--blobs")
        assert location and location.startswith("file:///"), f"{subcommand}: --blobs file:///…"
        locations.add(location)
        mounts = {m["mountPath"].rstrip("/"): m["name"] for m in c.get("volumeMounts", [])}
        volume_name = mounts.get(location.removeprefix("file://").rstrip("/"))
        assert volume_name, f"{subcommand}: nothing is mounted at {location}"
        volumes = {v["name"]: v for v in d["spec"]["template"]["spec"]["volumes"]}
        claim = volumes[volume_name].get("persistentVolumeClaim", {}).get("claimName")
        assert claim == claims[0]["metadata"]["name"]
    assert len(locations) == 1, "the API and the workers must use the same blobs location"


def test_the_autoscaler_scales_the_worker_on_unfinished_work():
    scalers = [d for d in manifests() if d["kind"] == "ScaledObject"]
    assert len(scalers) == 1
    spec = scalers[0]["spec"]
    worker = deployment_running("worker")
    assert spec["scaleTargetRef"]["name"] == worker["metadata"]["name"]
    assert spec["scaleTargetRef"].get("kind", "Deployment") == "Deployment"
    assert 0 <= spec.get("minReplicaCount", 0) <= spec["maxReplicaCount"]
    (trigger,) = spec["triggers"]
    assert trigger["type"] == "postgresql"
    meta = trigger["metadata"]
    assert all(isinstance(v, str) for v in meta.values()), "KEDA takes string values only"
    assert float(meta["targetQueryValue"]) > 0
    assert meta["connectionFromEnv"] in kube_env(container(worker))
    query = " ".join(meta["query"].split())
    for part in ("FROM fit_tasks", "'waiting'", "'leased'", "FROM sweeps", "'queued'"):
        assert part in query


# ---- compose -------------------------------------------------------------------------------


def test_compose_runs_one_api_and_three_workers():
    def count(services):
        return sum(s.get("deploy", {}).get("replicas", 1) for s in services)

    assert count(compose_services("serve")) == 1
    assert count(compose_services("worker")) == 3
    (api,) = compose_services("serve")
    assert flag(compose_command(api), "--workers") == "0"


def test_compose_builds_from_the_containerfile():
    for service in compose_services("serve") + compose_services("worker"):
        build = service["build"]
        assert (COMPOSE.parent / build["context"] / build["dockerfile"]).resolve() == CONTAINERFILE


def test_compose_health_checks_ask_the_ports_the_processes_listen_on():
    services = compose()["services"]
    assert all("healthcheck" in s for s in services.values()), "every service needs one"
    for subcommand, option in (("serve", "--listen"), ("worker", "--health-listen")):
        for s in compose_services(subcommand):
            port = listen_port(flag(compose_command(s), option))
            test = " ".join(s["healthcheck"]["test"])
            assert f"127.0.0.1:{port}/readyz" in test
    (api,) = compose_services("serve")
    published = [str(p).rsplit(":", 1)[-1] for p in api["ports"]]
    assert str(listen_port(flag(compose_command(api), "--listen"))) in published


def test_compose_mixgauge_services_wait_for_a_healthy_postgres_they_can_log_in_to():
    services = compose()["services"]
    (database,) = [n for n, s in services.items()
                   if str(s.get("image", "")).startswith("postgres:")]
    db_env = compose_env(services[database])
    for s in compose_services("serve") + compose_services("worker"):
        assert s["depends_on"][database]["condition"] == "service_healthy"
        url = urlsplit(compose_env(s)["MIXGAUGE_STORE"])
        assert url.scheme == "postgres" and url.hostname == database
        assert url.username == db_env["POSTGRES_USER"]
        assert url.password == db_env["POSTGRES_PASSWORD"]
        assert url.path == "/" + db_env["POSTGRES_DB"]


def test_compose_api_and_workers_share_the_blobs_volume():
    c = compose()
    sources = set()
    for s in compose_services("serve") + compose_services("worker"):
        directory = flag(compose_command(s), "--blobs").removeprefix("file://")
        mounted = {v.split(":")[1]: v.split(":")[0] for v in s["volumes"]}
        assert directory in mounted, f"nothing is mounted at {directory}"
        sources.add(mounted[directory])
    assert len(sources) == 1 and sources <= set(c["volumes"]), "one named volume for all"


def test_compose_worker_stop_grace_outlasts_its_lease():
    for s in compose_services("worker"):
        grace = seconds(s.get("stop_grace_period", "10s"))
        assert grace > lease(compose_command(s), compose_env(s).get("MIXGAUGE_LEASE"))


# ---- Containerfile -------------------------------------------------------------------------


def test_containerfile_builds_in_rust_and_runs_on_slim_debian():
    steps = containerfile_instructions()
    stages = [rest.split() for op, rest in steps if op == "FROM"]
    assert len(stages) >= 2
    assert stages[0][0] == "rust:1.95-bookworm" and stages[-1][0] == "debian:bookworm-slim"
    builder = stages[0][2] if len(stages[0]) > 2 and stages[0][1].upper() == "AS" else "0"
    build = " ".join(rest for op, rest in steps if op == "RUN" and "cargo build" in rest)
    assert "--release" in build and "-p mixgauge-cli" in build
    assert "--mount=type=cache" in build, "dependency caching needs a cache mount"
    assert any(op == "COPY" and f"--from={builder}" in rest for op, rest in final_stage())


def test_containerfile_runs_mixgauge_as_the_manifests_numeric_non_root_user():
    final = final_stage()
    users = [rest for op, rest in final if op == "USER"]
    assert users, "the runtime stage sets no USER, so it runs as root"
    uid = users[-1].split(":")[0]
    assert uid.isdigit() and int(uid) != 0, "runAsNonRoot can check a numeric user only"
    for d in (x for x in manifests() if x["kind"] == "Deployment"):
        assert d["spec"]["template"]["spec"]["securityContext"]["runAsUser"] == int(uid)
    assert [rest for op, rest in final if op == "ENTRYPOINT"][-1] == '["mixgauge"]'
    installs = " ".join(rest for op, rest in final if op == "RUN")
    assert "ca-certificates" in installs
    uses_curl = any("curl" in s.get("healthcheck", {}).get("test", [])
                    for s in compose()["services"].values())
    assert not uses_curl or re.search(r"install\b.*\bcurl\b", installs), "curl is not installed"


def test_dockerignore_keeps_build_output_and_history_out_of_the_context():
    ignored = {l.strip().strip("/") for l in (REPO / ".dockerignore").read_text().splitlines()}
    assert {"target", ".venv", ".git"} <= ignored


# ---- against the binary --------------------------------------------------------------------


def binary() -> Path:
    """``$MIXGAUGE_BIN``; the test is skipped when it is unset, and fails when it is not a
    runnable file."""
    value = os.environ.get("MIXGAUGE_BIN")
    if not value:
        pytest.skip("MIXGAUGE_BIN is unset: set it to a built mixgauge to check the binary")
    path = Path(value)
    assert path.is_file() and os.access(path, os.X_OK), f"MIXGAUGE_BIN={value} is not runnable"
    return path


def used_names() -> dict[str, tuple[set[str], set[str]]]:
    """Per subcommand, the --flags and MIXGAUGE_* variables the deployment files give it."""
    used = {"serve": (set(), set()), "worker": (set(), set())}

    def note(args: list[str], env_names) -> None:
        if args[:1] and args[0] in used:
            flags, env = used[args[0]]
            flags.update(a.split("=", 1)[0] for a in args if a.startswith("--"))
            env.update(n for n in env_names if n.startswith("MIXGAUGE_"))

    for d in manifests():
        if d["kind"] == "Deployment":
            c = container(d)
            note(arguments(c), kube_env(c))
    for s in compose()["services"].values():
        note(compose_command(s), compose_env(s))
    return used


def test_every_flag_and_variable_the_files_use_exists_in_the_binary():
    path = binary()
    helps = {}
    for subcommand, (flags, env) in used_names().items():
        helps[subcommand] = subprocess.run(
            [str(path), subcommand, "--help"], capture_output=True, text=True, timeout=30,
            check=True,
        ).stdout
        for name in sorted(flags | env):
            assert re.search(rf"(?<![\w-]){re.escape(name)}(?![\w-])", helps[subcommand]), (
                f"`mixgauge {subcommand} --help` does not mention {name}"
            )
    # The image's ENV defaults serve one subcommand or the other.
    for op, rest in containerfile_instructions():
        if op == "ENV":
            for name in re.findall(r"(MIXGAUGE_\w+)=", rest):
                assert any(name in h for h in helps.values()), f"no subcommand reads {name}"


def test_the_autoscale_query_runs_on_the_schema_the_binary_creates(tmp_path: Path):
    path = binary()
    admin = os.environ.get("MIXGAUGE_TEST_POSTGRES", "postgres://postgres@127.0.0.1:5432/postgres")
    (scaler,) = [d for d in manifests() if d["kind"] == "ScaledObject"]
    query = scaler["spec"]["triggers"][0]["metadata"]["query"]

    def psql(url: str, sql: str) -> subprocess.CompletedProcess:
        return subprocess.run(["psql", url, "-AtX", "-v", "ON_ERROR_STOP=1", "-c", sql],
                              capture_output=True, text=True, timeout=30)

    made = psql(admin, "SELECT 1")
    assert made.returncode == 0, (
        f"no PostgreSQL at {admin} (set MIXGAUGE_TEST_POSTGRES): {made.stderr.strip()}"
    )
    name = f"mixgauge_deploy_{uuid.uuid4().hex[:12]}"
    assert psql(admin, f"CREATE DATABASE {name}").returncode == 0
    url = urlunsplit(urlsplit(admin)._replace(path="/" + name))
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    log = tmp_path / "worker.log"
    with open(log, "wb") as out:
        worker = subprocess.Popen(
            [str(path), "worker", "--store", url, "--blobs", f"file://{tmp_path}/blobs",
             "--cache", str(tmp_path / "cache"), "--health-listen", f"127.0.0.1:{port}"],
            stdout=out, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
        )
    try:
        deadline = time.monotonic() + 30
        while True:
            assert worker.poll() is None, f"the worker exited:\n{log.read_text()[-3000:]}"
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/readyz", timeout=2) as r:
                    if r.status == 200:
                        break
            except (urllib.error.URLError, OSError):
                pass
            assert time.monotonic() < deadline, f"worker not ready:\n{log.read_text()[-3000:]}"
            time.sleep(0.1)
        answer = psql(url, query)
        assert answer.returncode == 0, f"the query fails on the schema: {answer.stderr}"
        assert answer.stdout.strip() == "0", "a new database has no unfinished work"
    finally:
        worker.send_signal(signal.SIGTERM)
        try:
            worker.wait(timeout=15)
        except subprocess.TimeoutExpired:
            worker.kill()
            worker.wait()
        psql(admin, f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")
