"""deploy/kubernetes: schema validation offline, then the operational fields one by one.

Schema: kubernetes-validate (PyPI) bundles the Kubernetes OpenAPI-derived JSON schemas;
``strict`` rejects unknown fields, so a misspelt key fails. The version is pinned so the
result does not move with the package's default.
"""

from __future__ import annotations

import copy
import re
from pathlib import Path
from typing import Any

import kubernetes_validate
import pytest
import yaml

K8S_VERSION = "1.37.0"
KDIR = Path(__file__).resolve().parents[1] / "deploy" / "kubernetes"
DOCKERFILE = KDIR.parent / "Dockerfile"


def _load(name: str) -> dict[str, Any]:
    docs = [d for d in yaml.safe_load_all((KDIR / name).read_text()) if d is not None]
    assert len(docs) == 1, f"{name}: expected one document, got {len(docs)}"
    return docs[0]


def _kustomization() -> dict[str, Any]:
    return _load("kustomization.yaml")


def _resources() -> dict[str, dict[str, Any]]:
    """kind -> manifest, for every file the kustomization applies."""
    out: dict[str, dict[str, Any]] = {}
    for name in _kustomization()["resources"]:
        doc = _load(name)
        assert doc["kind"] not in out, f"two {doc['kind']} manifests"
        out[doc["kind"]] = doc
    return out


def _container() -> dict[str, Any]:
    (c,) = _resources()["Deployment"]["spec"]["template"]["spec"]["containers"]
    return c


def _manifest_files() -> list[str]:
    return sorted(p.name for p in KDIR.glob("*.yaml") if p.name != "kustomization.yaml")


# --- schema ---------------------------------------------------------------------------


@pytest.mark.parametrize("name", _manifest_files())
def test_manifest_validates_strictly(name: str) -> None:
    doc = _load(name)
    kubernetes_validate.validate(doc, K8S_VERSION, strict=True)


def test_strict_validation_rejects_a_misspelt_field() -> None:
    # The check above can fail: the same Deployment with one misspelt key does not pass.
    doc = copy.deepcopy(_resources()["Deployment"])
    c = doc["spec"]["template"]["spec"]["containers"][0]
    c["readinesProbe"] = c.pop("readinessProbe")
    with pytest.raises(kubernetes_validate.ValidationError):
        kubernetes_validate.validate(doc, K8S_VERSION, strict=True)


def test_kustomization_lists_every_manifest_but_the_secret_example() -> None:
    k = _kustomization()
    assert k["apiVersion"] == "kustomize.config.k8s.io/v1beta1"
    assert k["kind"] == "Kustomization"
    listed = set(k["resources"])
    assert listed == set(_manifest_files()) - {"secret.example.yaml"}
    assert {i["name"] for i in k["images"]} == {_container()["image"]}
    kinds = set(_resources())
    assert kinds == {"ConfigMap", "Deployment", "Service", "HorizontalPodAutoscaler", "PodDisruptionBudget"}


# --- Deployment: probes, resources, security ------------------------------------------


def test_probes_use_health_and_readiness_routes() -> None:
    c = _container()
    assert c["livenessProbe"]["httpGet"]["path"] == "/healthz"
    assert c["readinessProbe"]["httpGet"]["path"] == "/readyz"
    startup = c["startupProbe"]
    assert startup["httpGet"]["path"] in {"/healthz", "/readyz"}
    # The startup window (period x failures) covers a slow start of at least 30 s, and
    # liveness does not kill a process faster than readiness takes it out of the Service.
    assert startup["periodSeconds"] * startup["failureThreshold"] >= 30
    live, ready = c["livenessProbe"], c["readinessProbe"]
    assert live["periodSeconds"] * live["failureThreshold"] > ready["periodSeconds"] * ready["failureThreshold"]
    port_names = {p["name"] for p in c["ports"]}
    for probe in ("livenessProbe", "readinessProbe", "startupProbe"):
        assert c[probe]["httpGet"]["port"] in port_names


def _quantity(q: str | int | float) -> float:
    """Kubernetes quantity -> float (cores for CPU, bytes for memory)."""
    s = str(q)
    units = {"m": 1e-3, "Ki": 2**10, "Mi": 2**20, "Gi": 2**30, "k": 1e3, "M": 1e6, "G": 1e9}
    m = re.fullmatch(r"([0-9.]+)([A-Za-z]*)", s)
    assert m, f"bad quantity {s!r}"
    return float(m.group(1)) * units.get(m.group(2), 1.0) if m.group(2) else float(m.group(1))


def test_quantity_parser() -> None:
    assert _quantity("250m") == 0.25
    assert _quantity("1") == 1.0
    assert _quantity("256Mi") == 256 * 2**20


def test_resources_requests_and_limits() -> None:
    r = _container()["resources"]
    req, lim = r["requests"], r["limits"]
    assert set(req) == {"cpu", "memory"} and set(lim) == {"cpu", "memory"}
    # Memory request = limit (no overcommit of the one resource that kills the pod).
    assert _quantity(req["memory"]) == _quantity(lim["memory"])
    assert 0.05 <= _quantity(req["cpu"]) <= _quantity(lim["cpu"])
    # One Python process: more than one core of limit would be unused.
    assert _quantity(lim["cpu"]) <= 1.0
    # The memory limit leaves room above the measured RSS (deploy/README.md, Sizing).
    measured = _measured_peak_rss_mib()
    assert _quantity(lim["memory"]) >= 1.5 * measured * 2**20


def _measured_peak_rss_mib() -> float:
    text = (KDIR.parent / "README.md").read_text()
    m = re.search(r"^Measured peak RSS: ([0-9.]+) MiB", text, re.M)
    assert m, "deploy/README.md must state the measured peak RSS in MiB"
    return float(m.group(1))


def test_security_context_is_restricted() -> None:
    pod = _resources()["Deployment"]["spec"]["template"]["spec"]
    assert pod["automountServiceAccountToken"] is False
    psc = pod["securityContext"]
    assert psc["runAsNonRoot"] is True
    assert psc["runAsUser"] != 0
    assert psc["seccompProfile"]["type"] == "RuntimeDefault"
    csc = _container()["securityContext"]
    assert csc["allowPrivilegeEscalation"] is False
    assert csc["readOnlyRootFilesystem"] is True
    assert csc["capabilities"]["drop"] == ["ALL"]
    assert "add" not in csc["capabilities"]
    assert csc.get("privileged", False) is False
    assert csc["runAsNonRoot"] is True
    # The pod's UID is the image's USER.
    user = re.search(r"^USER\s+(\d+)", DOCKERFILE.read_text(), re.M)
    assert user and int(user.group(1)) == psc["runAsUser"]


def test_writable_paths_are_emptydirs() -> None:
    pod = _resources()["Deployment"]["spec"]["template"]["spec"]
    volumes = {v["name"]: v for v in pod["volumes"]}
    mounts = {m["mountPath"]: m["name"] for m in _container()["volumeMounts"]}
    env = _resources()["ConfigMap"]["data"]
    metrics_dir = env["PROMETHEUS_MULTIPROC_DIR"]
    assert set(mounts) == {"/tmp", metrics_dir}
    for path, vol in mounts.items():
        assert "emptyDir" in volumes[vol], f"{path} must be an emptyDir"
        assert "sizeLimit" in volumes[vol]["emptyDir"]
    assert volumes[mounts[metrics_dir]]["emptyDir"]["medium"] == "Memory"
    # Same directory as the image sets.
    assert f"PROMETHEUS_MULTIPROC_DIR={metrics_dir}" in DOCKERFILE.read_text()


def test_one_process_per_pod_and_one_blas_thread() -> None:
    c = _container()
    env = _resources()["ConfigMap"]["data"]
    assert env["PROTOLYTE_WORKERS"] == "1"
    assert c.get("args", []) in ([], ["--workers", "1"])
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        assert env[var] == "1"
    assert env["PROTOLYTE_HOST"] == "0.0.0.0"
    assert int(env["PROTOLYTE_PORT"]) == c["ports"][0]["containerPort"]
    assert {ref["configMapRef"]["name"] for ref in c["envFrom"]} == {_resources()["ConfigMap"]["metadata"]["name"]}
    # Every key is a variable the service, prometheus_client or BLAS reads.
    allowed = re.compile(r"PROTOLYTE_[A-Z_]+|PROMETHEUS_MULTIPROC_DIR|(OMP|OPENBLAS|MKL)_NUM_THREADS")
    assert all(allowed.fullmatch(k) for k in env), sorted(env)


def test_api_key_is_an_optional_secret_reference() -> None:
    (var,) = [e for e in _container()["env"] if e["name"] == "PROTOLYTE_API_KEY"]
    ref = var["valueFrom"]["secretKeyRef"]
    assert ref["optional"] is True
    secret = _load("secret.example.yaml")
    assert secret["kind"] == "Secret"
    assert ref["name"] == secret["metadata"]["name"]
    assert ref["key"] in secret["stringData"]
    assert "PROTOLYTE_API_KEY" not in _resources()["ConfigMap"]["data"]


def test_graceful_termination_outlasts_prestop() -> None:
    pod = _resources()["Deployment"]["spec"]["template"]["spec"]
    pre = _container()["lifecycle"]["preStop"]["sleep"]["seconds"]
    assert pod["terminationGracePeriodSeconds"] >= pre + 30


# --- Service, HPA, PDB ----------------------------------------------------------------


def test_selectors_match_pod_labels() -> None:
    res = _resources()
    labels = res["Deployment"]["spec"]["template"]["metadata"]["labels"]

    def matches(sel: dict[str, str]) -> bool:
        return bool(sel) and all(labels.get(k) == v for k, v in sel.items())

    assert matches(res["Deployment"]["spec"]["selector"]["matchLabels"])
    assert matches(res["Service"]["spec"]["selector"])
    assert matches(res["PodDisruptionBudget"]["spec"]["selector"]["matchLabels"])
    port = res["Service"]["spec"]["ports"][0]
    assert port["targetPort"] in {p["name"] for p in _container()["ports"]}


def test_hpa_scales_the_deployment_on_cpu() -> None:
    res = _resources()
    hpa = res["HorizontalPodAutoscaler"]
    assert hpa["apiVersion"] == "autoscaling/v2"
    ref = hpa["spec"]["scaleTargetRef"]
    assert (ref["apiVersion"], ref["kind"], ref["name"]) == (
        "apps/v1", "Deployment", res["Deployment"]["metadata"]["name"],
    )
    (metric,) = hpa["spec"]["metrics"]
    assert metric["type"] == "Resource"
    assert metric["resource"]["name"] == "cpu"
    assert metric["resource"]["target"]["type"] == "Utilization"
    assert 30 <= metric["resource"]["target"]["averageUtilization"] <= 90
    assert hpa["spec"]["minReplicas"] >= 2
    assert hpa["spec"]["maxReplicas"] > hpa["spec"]["minReplicas"]


def test_pdb_keeps_one_of_at_least_two() -> None:
    res = _resources()
    pdb = res["PodDisruptionBudget"]
    assert pdb["apiVersion"] == "policy/v1"
    assert pdb["spec"]["minAvailable"] == 1
    assert res["Deployment"]["spec"]["replicas"] >= 2
    assert res["HorizontalPodAutoscaler"]["spec"]["minReplicas"] >= 2
    # Rolling updates never drop below the current count.
    assert res["Deployment"]["spec"]["strategy"]["rollingUpdate"]["maxUnavailable"] == 0


def test_readme_sizing_figures_are_the_recorded_measurement() -> None:
    import json  # noqa: PLC0415

    raw = json.loads((KDIR.parent / "sizing-measurement.json").read_text())
    assert round(raw["peak_rss_mib"]) == round(_measured_peak_rss_mib())
    text = (KDIR.parent / "README.md").read_text()
    m = re.search(r"^Measured peak RSS: [0-9.]+ MiB; CPU per single-stream request: ([0-9.]+) ms", text, re.M)
    assert m and float(m.group(1)) == round(raw["single"]["cpu_ms_per_request"], 1)
    assert raw["single"]["statuses"] == {"200": raw["single"]["requests"]}
    assert raw["batch"]["statuses"] == {"200": raw["batch"]["requests"]}
    assert raw["batch"]["batch_size"] == int(_resources()["ConfigMap"]["data"]["PROTOLYTE_BATCH_MAX_ITEMS"])
    # The CPU request serves a sensible rate: 20-500 single-stream requests/s per pod.
    cpu_request = _quantity(_container()["resources"]["requests"]["cpu"])
    per_pod_rps = cpu_request / (raw["single"]["cpu_ms_per_request"] / 1000)
    assert 20 <= per_pod_rps <= 500
