"""The deployment files held to the code: gunicorn's config, the container build file, the
Kubernetes manifests and the systemd unit.

No container engine or cluster runs here, so each file is parsed (PyYAML for the
manifests, configparser for the unit, a small linter of our own for the Containerfile) and
the fields that decide whether a deployment works are compared with what the service
really does: its routes (Flask's url_map), the port gunicorn binds, the settings table.
"""

from __future__ import annotations

import configparser
import math
import os
import re
import runpy
import shlex
from collections.abc import Iterator
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pytest
import yaml
from servers import DATA_DIR_ENV

import service.http.observe
from service.app import create_app
from service.cli.serve import APP_SPEC
from service.settings import (
    ENV_PREFIX,
    SETTINGS,
    bind_port,
    load_server_settings,
    load_settings,
)

ROOT = Path(__file__).resolve().parents[2]
DEPLOY = ROOT / "deploy"
CONF = DEPLOY / "gunicorn.conf.py"
CONTAINERFILE = DEPLOY / "Containerfile"
UNIT = DEPLOY / "certimatch.service"
K8S = DEPLOY / "k8s"
KNOWN_ENV = {s.env for s in SETTINGS}


@pytest.fixture(autouse=True)
def clean_env(monkeypatch: pytest.MonkeyPatch) -> None:
    # gunicorn.conf.py reads the process environment; a CERTIMATCH_* or metrics directory
    # left in the shell would change what these tests see.
    for env in KNOWN_ENV - {DATA_DIR_ENV}:       # keep the session's temporary store
        monkeypatch.delenv(env, raising=False)
    # on_starting sets this variable itself; setenv first makes monkeypatch remember the
    # variable's state before the test (delenv of an absent one records nothing), so that
    # the value does not leak into later tests and the servers they start.
    monkeypatch.setenv("PROMETHEUS_MULTIPROC_DIR", "")
    monkeypatch.delenv("PROMETHEUS_MULTIPROC_DIR")


def load_conf(monkeypatch: pytest.MonkeyPatch, env: dict[str, str] | None = None
              ) -> dict[str, Any]:
    """gunicorn.conf.py's namespace, as gunicorn would load it with ``env`` set."""
    for name, value in (env or {}).items():
        monkeypatch.setenv(name, value)
    return runpy.run_path(str(CONF))


def routes() -> dict[str, set[str]]:
    """Path -> methods of the app built with its default settings."""
    found: dict[str, set[str]] = {}
    for rule in create_app({"TESTING": True}).url_map.iter_rules():
        found.setdefault(rule.rule, set()).update(rule.methods or ())
    return found


# --- gunicorn.conf.py ---------------------------------------------------------------------


def test_conf_defaults(monkeypatch):
    conf = load_conf(monkeypatch)
    assert conf["bind"] == "127.0.0.1:8080"
    assert conf["workers"] == conf["usable_cores"]() >= 1
    assert conf["worker_class"] == "sync"
    assert (conf["timeout"], conf["graceful_timeout"]) == (120, 30)
    # Recycling with jitter: workers must not all restart at the same request count.
    assert conf["max_requests"] > 0
    assert 0 < conf["max_requests_jitter"] < conf["max_requests"]
    # Prometheus' multiprocess mode needs the app imported after the fork.
    assert conf["preload_app"] is False
    # The app logs each request itself; gunicorn's line would be a duplicate.
    assert conf["accesslog"] is None
    assert conf["loglevel"] == "info"
    assert conf["logger_class"].__name__ == "JsonLogger"


def test_conf_reads_the_settings_table(monkeypatch):
    conf = load_conf(monkeypatch, {
        "CERTIMATCH_BIND": "0.0.0.0:9123", "CERTIMATCH_WORKERS": "3",
        "CERTIMATCH_WORKER_TIMEOUT": "60", "CERTIMATCH_GRACEFUL_TIMEOUT": "7",
        "CERTIMATCH_ACCESS_LOG": "true", "CERTIMATCH_LOG_LEVEL": "WARNING"})
    assert (conf["bind"], conf["workers"], conf["timeout"], conf["graceful_timeout"]) == (
        "0.0.0.0:9123", 3, 60, 7)
    assert conf["accesslog"] == "-"
    assert conf["loglevel"] == "warning"


@pytest.mark.parametrize(("env", "value", "message"), [
    ("CERTIMATCH_WORKERS", "0", "CERTIMATCH_WORKERS must be a whole number of at least 1 or "
                                "auto, got '0'"),
    ("CERTIMATCH_BIND", "8080", "CERTIMATCH_BIND must be HOST:PORT"),
    ("CERTIMATCH_BIND", "0.0.0.0:70000", "CERTIMATCH_BIND must be HOST:PORT"),
    ("CERTIMATCH_ACCESS_LOG", "yes", "CERTIMATCH_ACCESS_LOG must be true or false, got 'yes'"),
    ("CERTIMATCH_LOG_LEVEL", "loud", "CERTIMATCH_LOG_LEVEL must be one of debug, info, "
                                     "warning, error, got 'loud'"),
    # An app setting is checked in the master too, before any worker imports the app.
    ("CERTIMATCH_MAX_ARCS", "lots", "CERTIMATCH_MAX_ARCS must be a whole number, got 'lots'"),
])
def test_conf_stops_on_a_bad_setting_naming_it(monkeypatch, env, value, message):
    with pytest.raises(SystemExit) as info:
        load_conf(monkeypatch, {env: value})
    assert str(info.value).startswith(f"certimatch: {message}")


def test_workers_auto_means_usable_cores(monkeypatch):
    conf = load_conf(monkeypatch, {"CERTIMATCH_WORKERS": "auto"})
    assert conf["workers"] == conf["usable_cores"]()


@pytest.mark.parametrize(("files", "expected"), [
    ({"cpu.max": "150000 100000\n"}, 2),          # cgroup v2, 1.5 CPUs: round up
    ({"cpu.max": "100000 100000\n"}, 1),
    ({"cpu.max": "max 100000\n"}, None),           # no limit: affinity decides
    ({"cpu/cpu.cfs_quota_us": "300000\n", "cpu/cpu.cfs_period_us": "100000\n"}, 3),  # v1
    ({"cpu/cpu.cfs_quota_us": "-1\n", "cpu/cpu.cfs_period_us": "100000\n"}, None),
    ({}, None),
])
def test_usable_cores_follows_the_cgroup_cpu_limit(monkeypatch, tmp_path, files, expected):
    conf = load_conf(monkeypatch)
    for name, text in files.items():
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_text(text)
    # Pretend the process may run on many cores, so that the limit is what shows.
    monkeypatch.setattr("os.sched_getaffinity", lambda pid: set(range(64)))
    assert conf["usable_cores"](tmp_path) == (64 if expected is None else expected)


def test_child_exit_marks_the_worker_dead(monkeypatch):
    import prometheus_client.multiprocess

    seen: list[int] = []
    monkeypatch.setattr(prometheus_client.multiprocess, "mark_process_dead",
                        lambda pid, path=None: seen.append(pid))
    load_conf(monkeypatch)["child_exit"](None, SimpleNamespace(pid=4321))
    assert seen == [4321]


@pytest.fixture
def no_logging_setup(monkeypatch: pytest.MonkeyPatch) -> list[str]:
    # on_starting configures the process's logging; in the test process that would take
    # the service's loggers away from pytest's capture, so the call is only recorded.
    levels: list[str] = []
    monkeypatch.setattr(service.http.observe, "configure_logging",
                        lambda level="info", stream=None: levels.append(level))
    return levels


#: What on_starting reads of gunicorn's arbiter: the final bind list.
LOOPBACK_SERVER = SimpleNamespace(cfg=SimpleNamespace(bind=["127.0.0.1:8080"]))


def test_on_starting_empties_a_given_metrics_dir(monkeypatch, tmp_path, no_logging_setup):
    for name in ("counter_11.db", "histogram_11.db", "gauge_all_11.db", "notes.txt"):
        (tmp_path / name).write_text("x")
    conf = load_conf(monkeypatch, {"PROMETHEUS_MULTIPROC_DIR": str(tmp_path),
                                   "CERTIMATCH_LOG_LEVEL": "error"})
    conf["on_starting"](LOOPBACK_SERVER)
    # Counts of a previous run must not be added to this run's; other files stay.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]
    assert no_logging_setup == ["error"]
    conf["on_exit"](None)
    assert tmp_path.is_dir(), "a directory given by the operator is never removed"


def test_on_starting_creates_a_metrics_dir_and_on_exit_removes_it(monkeypatch,
                                                                 no_logging_setup):
    conf = load_conf(monkeypatch)
    conf["on_starting"](LOOPBACK_SERVER)
    made = Path(os.environ["PROMETHEUS_MULTIPROC_DIR"])
    try:
        assert made.is_dir()
    finally:
        conf["on_exit"](None)
    assert not made.exists()


# --- Kubernetes manifests -----------------------------------------------------------------


def _documents() -> Iterator[tuple[str, dict[str, Any]]]:
    for path in sorted(K8S.glob("*.yaml")):
        for doc in yaml.safe_load_all(path.read_text(encoding="utf-8")):
            if doc is not None:
                yield path.name, doc


DOCS = list(_documents())


def _one(kind: str) -> dict[str, Any]:
    found = [doc for _, doc in DOCS if doc.get("kind") == kind]
    assert len(found) == 1, f"expected one {kind}, found {len(found)}"
    return found[0]


def _container() -> dict[str, Any]:
    containers = _one("Deployment")["spec"]["template"]["spec"]["containers"]
    assert len(containers) == 1
    container: dict[str, Any] = containers[0]
    return container


def _config_data() -> dict[str, str]:
    data: dict[str, str] = _one("ConfigMap")["data"]
    return data


def _pod_labels() -> dict[str, str]:
    labels: dict[str, str] = _one("Deployment")["spec"]["template"]["metadata"]["labels"]
    return labels


def _named_port(name: str) -> int:
    ports = {p["name"]: p["containerPort"] for p in _container()["ports"]}
    return int(ports[name])


def _port_of(ref: int | str) -> int:
    return _named_port(ref) if isinstance(ref, str) else int(ref)


def test_every_manifest_is_a_kubernetes_object():
    kinds = sorted(doc["kind"] for _, doc in DOCS)
    assert kinds == sorted(["ConfigMap", "Deployment", "HorizontalPodAutoscaler",
                            "Kustomization", "PodDisruptionBudget", "Secret", "Service"])
    for name, doc in DOCS:
        assert doc.get("apiVersion"), name
        assert doc.get("kind") == "Kustomization" or doc["metadata"].get("name"), name


def test_kustomization_lists_every_manifest():
    listed = _one("Kustomization")["resources"]
    on_disk = sorted(p.name for p in K8S.glob("*.yaml") if p.name != "kustomization.yaml")
    assert sorted(listed) == on_disk


@pytest.mark.parametrize(("probe", "route"), [("readinessProbe", "/readyz"),
                                              ("livenessProbe", "/healthz"),
                                              ("startupProbe", "/healthz")])
def test_probes_ask_real_routes_on_the_served_port(probe, route):
    get = _container()[probe]["httpGet"]
    assert get["path"] == route
    assert "GET" in routes()[get["path"]], f"{probe}: no GET {get['path']} in the app"
    assert _port_of(get["port"]) == _served_port()


def _served_port() -> int:
    """The port gunicorn binds with the ConfigMap's environment (the pod's)."""
    bind = load_server_settings(_config_data()).bind
    port = bind_port(bind)
    assert port is not None, f"the pod binds {bind}, not a TCP port"
    return port


def test_container_port_is_the_port_gunicorn_binds(monkeypatch):
    conf = load_conf(monkeypatch, _config_data())
    assert bind_port(conf["bind"]) == _named_port("http") == _served_port()
    # Bound to every interface inside the pod, or the kubelet and the Service cannot reach it.
    assert conf["bind"].startswith("0.0.0.0:")


def test_liveness_outlasts_a_long_solve():
    # Sync workers answer /healthz only between solves; killing a pod whose workers are all
    # busy would cut the solves short, so liveness must tolerate more than the worker timeout
    # (after which gunicorn itself replaces a stuck worker).
    live = _container()["livenessProbe"]
    tolerated = live["periodSeconds"] * live["failureThreshold"]
    assert tolerated > load_server_settings(_config_data()).worker_timeout


def test_pods_run_as_a_non_root_user():
    pod = _one("Deployment")["spec"]["template"]["spec"]
    context = pod["securityContext"]
    assert context["runAsNonRoot"] is True
    assert isinstance(context["runAsUser"], int) and context["runAsUser"] > 0
    assert context["runAsUser"] == _image_uid(), "not the image's user"
    container = _container()["securityContext"]
    assert container["allowPrivilegeEscalation"] is False
    assert container.get("runAsUser", context["runAsUser"]) > 0


def _quantity(text: str | int) -> float:
    """A Kubernetes resource quantity as a number (cores or bytes)."""
    units = {"m": 1e-3, "Ki": 2**10, "Mi": 2**20, "Gi": 2**30, "Ti": 2**40,
             "k": 1e3, "M": 1e6, "G": 1e9}
    match = re.fullmatch(r"([0-9.]+)([A-Za-z]*)", str(text))
    assert match, f"not a quantity: {text!r}"
    return float(match.group(1)) * units.get(match.group(2), 1)


def test_resources_have_requests_and_limits():
    resources = _container()["resources"]
    for kind in ("cpu", "memory"):
        request, limit = resources["requests"][kind], resources["limits"][kind]
        assert 0 < _quantity(request) <= _quantity(limit), kind


def test_workers_fit_the_cpu_limit():
    workers = load_server_settings(_config_data()).workers
    limit = math.ceil(_quantity(_container()["resources"]["limits"]["cpu"]))
    assert workers is None or workers <= limit


def test_graceful_stop_fits_the_termination_grace_period():
    pod = _one("Deployment")["spec"]["template"]["spec"]
    pre_stop = _container()["lifecycle"]["preStop"]["exec"]["command"]
    assert pre_stop[0] == "sleep"
    graceful = load_server_settings(_config_data()).graceful_timeout
    assert pod["terminationGracePeriodSeconds"] > int(pre_stop[1]) + graceful


def test_deployment_selects_its_own_pods():
    selector = _one("Deployment")["spec"]["selector"]["matchLabels"]
    assert selector and selector.items() <= _pod_labels().items()


def test_service_selects_the_pods_and_targets_the_named_port():
    spec = _one("Service")["spec"]
    assert spec["selector"] and spec["selector"].items() <= _pod_labels().items()
    for port in spec["ports"]:
        assert port["targetPort"] in {p["name"] for p in _container()["ports"]}
        assert _port_of(port["targetPort"]) == _served_port()


def test_hpa_scales_the_deployment():
    spec = _one("HorizontalPodAutoscaler")["spec"]
    target = spec["scaleTargetRef"]
    assert (target["apiVersion"], target["kind"], target["name"]) == (
        "apps/v1", "Deployment", _one("Deployment")["metadata"]["name"])
    assert 1 <= spec["minReplicas"] <= spec["maxReplicas"]
    # CPU utilisation is a share of the request: without one the HPA cannot compute it.
    assert any(m["resource"]["name"] == "cpu" for m in spec["metrics"])
    assert "cpu" in _container()["resources"]["requests"]


def test_pdb_selects_the_pods_and_still_allows_evictions():
    spec = _one("PodDisruptionBudget")["spec"]
    labels = spec["selector"]["matchLabels"]
    assert labels and labels.items() <= _pod_labels().items()
    # With minAvailable equal to the smallest replica count a node could never be drained.
    assert spec["minAvailable"] < _one("HorizontalPodAutoscaler")["spec"]["minReplicas"]


def test_configmap_holds_known_settings_with_valid_values():
    data = _config_data()
    assert data
    unknown = set(data) - KNOWN_ENV
    assert not unknown, f"not in the settings table: {sorted(unknown)}"
    assert all(isinstance(v, str) for v in data.values()), "ConfigMap values must be strings"
    # The same parsers as at start-up: a bad value here would stop every pod.
    load_settings(environ=data)
    load_server_settings(environ=data)
    assert load_settings(environ=data).metrics_enabled is True


def test_deployment_reads_the_configmap_and_the_token_secret():
    container = _container()
    config = _one("ConfigMap")["metadata"]["name"]
    assert {"configMapRef": {"name": config}} in container["envFrom"]
    secret = _one("Secret")
    refs = [e["valueFrom"]["secretKeyRef"] for e in container["env"]
            if e["name"] == ENV_PREFIX + "TOKENS"]
    assert len(refs) == 1
    assert refs[0]["name"] == secret["metadata"]["name"]
    assert refs[0]["key"] in {**secret.get("data", {}), **secret.get("stringData", {})}


def test_metrics_scrape_annotations_name_the_served_port_and_route():
    annotations = _one("Deployment")["spec"]["template"]["metadata"]["annotations"]
    assert int(annotations["prometheus.io/port"]) == _served_port()
    assert annotations["prometheus.io/path"] in routes()


def test_root_filesystem_is_read_only_with_a_writable_tmp():
    container = _container()
    assert container["securityContext"]["readOnlyRootFilesystem"] is True
    # gunicorn.conf.py creates the metrics directory with tempfile, under /tmp.
    mounts = {m["mountPath"]: m["name"] for m in container["volumeMounts"]}
    volumes = {v["name"]: v for v in _one("Deployment")["spec"]["template"]["spec"]["volumes"]}
    assert "emptyDir" in volumes[mounts["/tmp"]]


# --- Containerfile --------------------------------------------------------------------------


def parse_containerfile(text: str) -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) in order; comments dropped, continuation lines joined."""
    instructions: list[tuple[str, str]] = []
    pending = ""
    for line in text.splitlines():
        stripped = line.strip()
        if not pending and (not stripped or stripped.startswith("#")):
            continue
        if pending and stripped.startswith("#"):
            continue  # a comment inside a continued instruction
        if stripped.endswith("\\"):
            pending += stripped[:-1] + " "
            continue
        whole = (pending + stripped).strip()
        pending = ""
        word, _, rest = whole.partition(" ")
        instructions.append((word.upper(), rest.strip()))
    if pending:
        instructions.append((pending.split()[0].upper(), pending.partition(" ")[2].strip()))
    return instructions


def _expand(text: str, args: dict[str, str]) -> str:
    return re.sub(r"\$\{(\w+)\}|\$(\w+)", lambda m: args.get(m[1] or m[2], m[0]), text)


def _exec_form(args: str) -> list[str]:
    """The words of a JSON (exec form) or shell-form command."""
    if args.startswith("["):
        words: list[str] = yaml.safe_load(args)  # a JSON array is YAML too
        return words
    return shlex.split(args)


def lint_containerfile(text: str, bind_port_expected: int | None = None) -> list[str]:
    """What is wrong with a container build file, as readable findings (empty: none).

    Checks: a builder stage then a final stage that copies from it; every base image with
    an explicit tag that is not ``latest``; no ADD of a URL; the final stage switches to a
    non-root user before its ENTRYPOINT/CMD; a HEALTHCHECK that asks /healthz; EXPOSE
    equal to the port gunicorn binds; the command runs gunicorn with its config.
    """
    found: list[str] = []
    instructions = parse_containerfile(text)
    args: dict[str, str] = {}
    stages: list[list[tuple[str, str]]] = []
    for word, rest in instructions:
        if word == "ARG" and not stages:
            name, _, default = rest.partition("=")
            args[name.strip()] = default.strip()
        if word == "FROM":
            stages.append([])
        if stages:
            stages[-1].append((word, _expand(rest, args)))
    if len(stages) < 2:
        return ["needs a builder stage and a final stage"]
    first = stages[0][0][1].split()
    if len(first) != 3 or first[1].upper() != "AS" or first[2] != "builder":
        found.append("the first stage must be `FROM image AS builder`, "
                     f"not `FROM {stages[0][0][1]}`")
    for stage in stages:
        image = stage[0][1].split()[0]
        tag = image.rpartition(":")[2] if ":" in image.split("/")[-1] else ""
        if "@sha256:" not in image and (not tag or tag == "latest"):
            found.append(f"base image {image} needs an explicit tag other than latest")
    for word, rest in instructions:
        if word == "ADD" and re.search(r"\b(?:https?|ftp)://", rest):
            found.append(f"ADD of a URL ({rest}): download in a RUN step with a checksum")
    final = stages[-1]
    words = [w for w, _ in final]
    if not any(w == "COPY" and "--from=builder" in r for w, r in final):
        found.append("the final stage copies nothing from the builder")
    user_at = [i for i, w in enumerate(words) if w == "USER"]
    start_at = [i for i, w in enumerate(words) if w in ("CMD", "ENTRYPOINT")]
    if not user_at:
        found.append("the final stage never sets USER: it would run as root")
    else:
        user = final[user_at[-1]][1].split(":")[0]
        if user in ("root", "0"):
            found.append(f"USER {user} is root")
        if start_at and user_at[-1] > min(start_at):
            found.append("USER must come before CMD/ENTRYPOINT")
    checks = [r for w, r in final if w == "HEALTHCHECK"]
    if not checks:
        found.append("no HEALTHCHECK in the final stage")
    elif "/healthz" not in checks[-1]:
        found.append("the HEALTHCHECK does not ask /healthz")
    exposed = [int(p.split("/")[0]) for w, r in final if w == "EXPOSE" for p in r.split()]
    if bind_port_expected is not None and exposed != [bind_port_expected]:
        found.append(f"EXPOSE {exposed} is not the bound port {bind_port_expected}")
    command = [word for w, r in final if w in ("ENTRYPOINT", "CMD") for word in _exec_form(r)]
    if "gunicorn" not in command or "--config" not in command:
        found.append("ENTRYPOINT/CMD does not run gunicorn with --config")
    return found


def _image_env() -> dict[str, str]:
    env: dict[str, str] = {}
    for word, rest in parse_containerfile(CONTAINERFILE.read_text(encoding="utf-8")):
        if word == "ENV":
            for item in shlex.split(rest):
                name, _, value = item.partition("=")
                env[name] = value
    return env


def _image_uid() -> int:
    users = [rest for word, rest in parse_containerfile(CONTAINERFILE.read_text(
        encoding="utf-8")) if word == "USER"]
    return int(users[-1].split(":")[0])


def test_containerfile_passes_the_lint(monkeypatch):
    conf = load_conf(monkeypatch, {k: v for k, v in _image_env().items()
                                   if k.startswith(ENV_PREFIX)})
    port = bind_port(conf["bind"])
    assert port is not None
    assert lint_containerfile(CONTAINERFILE.read_text(encoding="utf-8"), port) == []
    # The image and the Kubernetes pods serve the same port.
    assert port == _served_port()


GOOD_CONTAINERFILE = """\
ARG BASE=python:3.11-slim
FROM ${BASE} AS builder
RUN python -m venv /opt/v && /opt/v/bin/pip install .
FROM ${BASE}
COPY --from=builder /opt/v /opt/v
USER 10001
EXPOSE 8080
HEALTHCHECK CMD ["python", "-c", "ask /healthz"]
ENTRYPOINT ["gunicorn", "--config", "/etc/c.py"]
"""


@pytest.mark.parametrize(("change", "finding"), [
    (("ARG BASE=python:3.11-slim", "ARG BASE=python:latest"), "explicit tag"),
    (("ARG BASE=python:3.11-slim", "ARG BASE=python"), "explicit tag"),
    (("USER 10001\n", ""), "never sets USER"),
    (("USER 10001", "USER root"), "is root"),
    (("EXPOSE 8080", "EXPOSE 9090"), "EXPOSE [9090]"),
    (('HEALTHCHECK CMD ["python", "-c", "ask /healthz"]\n', ""), "no HEALTHCHECK"),
    (("RUN python", "ADD https://example.com/x.tgz /x\nRUN python"), "ADD of a URL"),
    (("FROM ${BASE} AS builder", "FROM ${BASE}"), "AS builder"),
    (("COPY --from=builder /opt/v /opt/v\n", ""), "copies nothing"),
    (('ENTRYPOINT ["gunicorn", "--config", "/etc/c.py"]', 'ENTRYPOINT ["flask", "run"]'),
     "gunicorn"),
])
def test_containerfile_lint_finds_each_mistake(change, finding):
    assert lint_containerfile(GOOD_CONTAINERFILE, 8080) == []
    old, new = change
    assert old in GOOD_CONTAINERFILE
    bad = GOOD_CONTAINERFILE.replace(old, new)
    assert any(finding in f for f in lint_containerfile(bad, 8080)), lint_containerfile(bad, 8080)


def test_user_after_the_command_is_found():
    bad = GOOD_CONTAINERFILE.replace("USER 10001\n", "") + "USER 10001\n"
    assert "USER must come before CMD/ENTRYPOINT" in lint_containerfile(bad, 8080)


def test_containerfile_copies_paths_that_exist():
    for word, rest in parse_containerfile(CONTAINERFILE.read_text(encoding="utf-8")):
        if word == "COPY" and not rest.startswith("--from"):
            *sources, _ = shlex.split(rest)
            for source in sources:
                assert (ROOT / source).exists(), f"COPY {source}: not in the repository"


def test_containerfile_healthcheck_asks_the_bound_port():
    health = [rest for word, rest in parse_containerfile(CONTAINERFILE.read_text(
        encoding="utf-8")) if word == "HEALTHCHECK"][-1]
    # The check reads the port from CERTIMATCH_BIND, so it follows a changed bind.
    assert "CERTIMATCH_BIND" in health and "/healthz" in health


# --- systemd unit ---------------------------------------------------------------------------


def _unit() -> configparser.ConfigParser:
    parser = configparser.ConfigParser(interpolation=None, strict=True)
    parser.optionxform = str  # type: ignore[assignment,method-assign]  # keys are case-sensitive
    parser.read_string(UNIT.read_text(encoding="utf-8"))
    return parser


def test_unit_runs_gunicorn_with_the_deploy_config():
    argv = shlex.split(_unit()["Service"]["ExecStart"])
    assert Path(argv[0]).name == "gunicorn"
    config = argv[argv.index("--config") + 1]
    assert config.endswith("/deploy/gunicorn.conf.py")
    assert argv[-1] == APP_SPEC


def test_unit_runs_as_a_service_user_and_restarts():
    service = _unit()["Service"]
    assert service.get("User") not in (None, "", "root", "0")
    assert service.get("Restart") not in (None, "", "no")
    assert service["Type"] == "notify"  # gunicorn reports READY=1 to systemd


def test_unit_stop_timeout_exceeds_the_graceful_timeout():
    seconds = int(_unit()["Service"]["TimeoutStopSec"].rstrip("s"))
    assert seconds > load_server_settings({}).graceful_timeout


def test_unit_metrics_dir_is_a_runtime_directory():
    service = _unit()["Service"]
    env = dict(item.split("=", 1) for item in shlex.split(service["Environment"]))
    runtime = {"/run/" + d for d in service["RuntimeDirectory"].split()}
    assert env["PROMETHEUS_MULTIPROC_DIR"] in runtime


def test_on_starting_creates_the_store_once_before_any_worker(monkeypatch, tmp_path,
                                                              no_logging_setup):
    conf = load_conf(monkeypatch, {"CERTIMATCH_DATA_DIR": str(tmp_path / "data")})
    conf["on_starting"](LOOPBACK_SERVER)
    try:
        assert (tmp_path / "data" / "decisions.sqlite3").is_file()
        assert (tmp_path / "data" / "signing-key.pem").is_file()
    finally:
        conf["on_exit"](None)


def test_on_starting_refuses_a_store_whose_schema_is_behind(monkeypatch, tmp_path,
                                                            no_logging_setup):
    import sqlite3
    from contextlib import closing

    (tmp_path / "data").mkdir()
    with closing(sqlite3.connect(tmp_path / "data" / "decisions.sqlite3")) as db:
        db.execute("CREATE TABLE parts_on_hand (id INTEGER)")
        db.commit()
    conf = load_conf(monkeypatch, {"CERTIMATCH_DATA_DIR": str(tmp_path / "data")})
    with pytest.raises(SystemExit, match=r"^certimatch: .*run `certimatch db upgrade`"):
        conf["on_starting"](LOOPBACK_SERVER)


def test_every_deployment_gives_the_store_a_writable_place():
    # The default DATA_DIR is relative to the working directory, which none of the three
    # may write: each names one (or, on Kubernetes, a PostgreSQL database and a key file).
    env = dict(item.split("=", 1)
               for item in shlex.split(_unit()["Service"]["Environment"]))
    assert env[ENV_PREFIX + "DATA_DIR"] == "/var/lib/" + _unit()["Service"]["StateDirectory"]
    assert _image_env()[ENV_PREFIX + "DATA_DIR"] == "/var/lib/certimatch"
    assert "chown 10001:10001 /var/lib/certimatch" in CONTAINERFILE.read_text()
    container = _container()
    names = {e["name"]: e for e in container["env"]}
    assert "secretKeyRef" in names[ENV_PREFIX + "DATABASE_URL"]["valueFrom"]
    key_dir = str(Path(names[ENV_PREFIX + "SIGNING_KEY_FILE"]["value"]).parent)
    mounts = {m["mountPath"]: m["name"] for m in container["volumeMounts"]}
    volumes = {v["name"]: v for v in _one("Deployment")["spec"]["template"]["spec"]["volumes"]}
    assert "secret" in volumes[mounts[key_dir]]
