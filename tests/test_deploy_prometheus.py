"""deploy/prometheus and deploy/grafana: rules, scrape config and dashboard.

Two layers:
* promtool (Debian package ``prometheus``), when on PATH: ``check rules``, ``test rules``
  (rules_test.yml: every alert fires on bad synthetic series and stays quiet on good
  ones), ``check config``, and the dashboard's PromQL parsed as recording rules.
* Always: a Python parse of the rules and the dashboard, checking that every metric
  name they use is one the service exports. The exported names are read from the live
  app's /metrics (in-process TestClient) when ``service.app`` imports, otherwise from
  the fixed list in the service's design.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from functools import lru_cache
from pathlib import Path
from typing import Any

import pytest
import yaml

ROOT = Path(__file__).resolve().parents[1]
PDIR = ROOT / "deploy" / "prometheus"
DASHBOARD = ROOT / "deploy" / "grafana" / "protolyte-dashboard.json"
PROMTOOL = shutil.which("promtool")
needs_promtool = pytest.mark.skipif(
    PROMTOOL is None,
    reason="promtool not on PATH (Debian: apt-get install -y --no-install-recommends prometheus)",
)

# The design's list (name -> type, label names); the live exposition must agree with it.
DESIGNED: dict[str, tuple[str, frozenset[str]]] = {
    "protolyte_http_requests": ("counter", frozenset({"route", "method", "status"})),
    "protolyte_http_request_duration_seconds": ("histogram", frozenset({"route", "method"})),
    "protolyte_solver_iterations": ("histogram", frozenset()),
    "protolyte_solve_failures": ("counter", frozenset({"reason"})),
    "protolyte_batch_size": ("histogram", frozenset()),
    "protolyte_coalesced_group_size": ("histogram", frozenset()),
    "protolyte_streams_solved": ("counter", frozenset()),
    "protolyte_build_info": ("gauge", frozenset({"version", "database_version"})),
}
# Labels Prometheus itself attaches (target labels from prometheus.yml) or uses (le).
TARGET_LABELS = frozenset({"job", "instance", "namespace", "pod", "node", "site", "le"})
PROMQL_WORDS = frozenset(
    """sum avg min max count by without on ignoring group_left group_right and or unless
    rate irate increase histogram_quantile absent bool offset topk bottomk le
    humanizePercentage humanizeDuration""".split()
)


def _sample_names(families: dict[str, tuple[str, frozenset[str]]]) -> set[str]:
    """Series names a family of each type appears as in the text exposition."""
    suffixes = {"counter": ("_total",), "histogram": ("_bucket", "_sum", "_count"), "gauge": ("",)}
    return {name + s for name, (kind, _) in families.items() for s in suffixes[kind]}


@lru_cache(maxsize=1)
def live_exposition() -> str | None:
    """The in-process app's /metrics text after a few requests, or None without service."""
    try:
        from service.app import create_app  # noqa: PLC0415
    except ImportError:
        return None
    from fastapi.testclient import TestClient  # noqa: PLC0415

    with TestClient(create_app()) as client:
        assert client.get("/readyz").status_code == 200
        assert client.get("/v1/systems").status_code == 200
        assert client.post("/v1/equilibrium", json={}).status_code == 422
        return client.get("/metrics").text


@lru_cache(maxsize=1)
def exported() -> tuple[str, dict[str, tuple[str, frozenset[str]]]]:
    """(source, {family: (type, label names)}) of what the service exports."""
    from prometheus_client.parser import text_string_to_metric_families  # noqa: PLC0415

    text = live_exposition()
    if text is None:
        return "design list (service.app not importable)", DESIGNED
    out: dict[str, tuple[str, frozenset[str]]] = {}
    for fam in text_string_to_metric_families(text):
        if not fam.name.startswith("protolyte_"):
            continue
        if fam.name.endswith("_created") and fam.name.removesuffix("_created") in out:
            continue  # single-process client adds <family>_created timestamps
        labels = {k for s in fam.samples for k in s.labels} - {"le"}
        out[fam.name] = (fam.type, frozenset(labels))
    return "live /metrics", out


def _rules() -> list[dict[str, Any]]:
    doc = yaml.safe_load((PDIR / "rules.yml").read_text())
    return [r for g in doc["groups"] for r in g["rules"]]


def _strip_strings(expr: str) -> str:
    return re.sub(r'"(?:[^"\\]|\\.)*"', '""', expr)


def _identifiers(expr: str) -> set[str]:
    """Metric and recording-rule names in a PromQL expression (strings, label lists,
    functions, keywords and durations removed)."""
    e = _strip_strings(expr)
    e = re.sub(r"\{[^}]*\}", "", e)  # label matchers
    e = re.sub(r"\b(by|without|on|ignoring|group_left|group_right)\s*\([^)]*\)", "", e)
    e = re.sub(r"\[[^\]]*\]", "", e)  # range selectors
    e = re.sub(r"\$[A-Za-z_]+", "", e)  # Grafana variables
    names = set(re.findall(r"[A-Za-z_:][A-Za-z0-9_:]*", e))
    return {n for n in names if n not in PROMQL_WORDS and not re.fullmatch(r"\d.*|e", n)}


def _label_names(expr: str) -> set[str]:
    e = _strip_strings(expr)
    names: set[str] = set()
    for body in re.findall(r"\{([^}]*)\}", e):
        names |= set(re.findall(r"([A-Za-z_][A-Za-z0-9_]*)\s*(?:=~|!~|!=|=)", body))
    for body in re.findall(r"\b(?:by|without|on|ignoring)\s*\(([^)]*)\)", e):
        names |= {n.strip() for n in body.split(",") if n.strip()}
    return names


def test_identifier_parser() -> None:
    expr = 'sum by (job, route) (rate(protolyte_x_total{status=~"5..", route="/a b"}[5m])) / on (job) y:z'
    assert _identifiers(expr) == {"protolyte_x_total", "y:z"}
    assert _label_names(expr) == {"job", "route", "status"}


def test_live_metrics_agree_with_the_design() -> None:
    source, fams = exported()
    assert set(fams) == set(DESIGNED), source
    for name, (kind, labels) in fams.items():
        d_kind, d_labels = DESIGNED[name]
        assert kind == d_kind, name
        # Labelled families without samples yet show no labels; those present must match.
        assert labels in (frozenset(), d_labels), (name, labels)


def test_rules_use_only_exported_metrics_and_labels() -> None:
    source, fams = exported()
    metric_names = _sample_names(fams) | {"up"}
    label_names = set().union(*(d[1] for d in DESIGNED.values())) | TARGET_LABELS
    records = {r["record"] for r in _rules() if "record" in r}
    used: set[str] = set()
    for rule in _rules():
        names = _identifiers(rule["expr"])
        used |= names
        unknown = {n for n in names if n not in metric_names and n not in records}
        assert not unknown, f"{rule.get('record') or rule.get('alert')}: {unknown} not exported ({source})"
        bad_labels = _label_names(rule["expr"]) - label_names
        assert not bad_labels, f"{rule.get('record') or rule.get('alert')}: labels {bad_labels}"
    # Every family the service exports is used somewhere, except build_info (dashboard).
    for fam in set(fams) - {"protolyte_build_info"}:
        assert any(n.startswith(fam) for n in used), fam


def test_alerts_cover_errors_latency_solver_and_replicas() -> None:
    alerts = {r["alert"]: r for r in _rules() if "alert" in r}
    records = {r["record"]: r["expr"] for r in _rules() if "record" in r}

    def expand(expr: str) -> str:
        for name in sorted(records, key=len, reverse=True):
            expr = expr.replace(name, f"({records[name]})")
        return expr

    need = {
        "ProtolyteHighErrorRatio": 'status=~"5.."',
        "ProtolyteHighLatencyP99": "histogram_quantile(0.99",
        "ProtolyteSolverFailures": "protolyte_solve_failures_total",
        "ProtolyteReplicaDown": "up{",
    }
    for name, fragment in need.items():
        assert fragment in expand(alerts[name]["expr"]), name
    for alert in alerts.values():
        assert alert["labels"]["severity"] in {"page", "warn"}
        assert alert["annotations"]["summary"] and alert["annotations"]["description"]
        assert re.fullmatch(r"\d+m", alert["for"])
    # Every recording rule name follows level:metric:operations.
    for name in records:
        assert re.fullmatch(r"[a-z_]+:protolyte_[a-z_]+:[a-z0-9_]+", name), name


def _dashboard_targets() -> list[tuple[str, str]]:
    dash = json.loads(DASHBOARD.read_text())
    out = []
    for panel in dash["panels"]:
        for target in panel.get("targets", []):
            out.append((panel["title"], target["expr"]))
    return out


def test_dashboard_shows_the_required_views() -> None:
    dash = json.loads(DASHBOARD.read_text())
    assert dash["uid"] and dash["title"] and dash["schemaVersion"] >= 36
    ids = [p["id"] for p in dash["panels"]]
    assert len(ids) == len(set(ids))
    exprs = "\n".join(e for _, e in _dashboard_targets())
    for q in ("0.50", "0.95", "0.99"):
        assert f"histogram_quantile({q}, sum by (le) (rate(protolyte_http_request_duration_seconds_bucket" in exprs
    assert "rate(protolyte_http_requests_total" in exprs
    assert 'status=~"5.."' in exprs
    assert "sum by (reason) (rate(protolyte_solve_failures_total" in exprs
    assert "protolyte_batch_size_bucket" in exprs
    assert "protolyte_solver_iterations_bucket" in exprs
    variables = {v["name"] for v in dash["templating"]["list"]}
    used_vars = set(re.findall(r"\$(\w+)", exprs)) - {"__rate_interval"}
    assert used_vars <= variables


def test_dashboard_uses_only_exported_metrics() -> None:
    source, fams = exported()
    metric_names = _sample_names(fams) | {"up"}
    for title, expr in _dashboard_targets():
        unknown = _identifiers(expr) - metric_names
        assert not unknown, f"panel {title!r}: {unknown} not exported ({source})"


def test_scrape_config_finds_pods_and_labels_job_protolyte() -> None:
    cfg = yaml.safe_load((PDIR / "prometheus.yml").read_text())
    assert cfg["rule_files"] == ["rules.yml"]
    jobs = {j["job_name"]: j for j in cfg["scrape_configs"]}
    k8s = jobs["protolyte"]
    assert k8s["kubernetes_sd_configs"] == [{"role": "pod"}]
    keeps = {tuple(r["source_labels"]): r["regex"] for r in k8s["relabel_configs"] if r.get("action") == "keep"}
    deployment = yaml.safe_load((ROOT / "deploy" / "kubernetes" / "deployment.yaml").read_text())
    pod = deployment["spec"]["template"]
    assert keeps[("__meta_kubernetes_pod_label_app_kubernetes_io_name",)] == pod["metadata"]["labels"]["app.kubernetes.io/name"]
    assert keeps[("__meta_kubernetes_pod_annotation_prometheus_io_scrape",)] == pod["metadata"]["annotations"]["prometheus.io/scrape"]
    assert keeps[("__meta_kubernetes_pod_container_port_name",)] in {p["name"] for p in pod["spec"]["containers"][0]["ports"]}
    static = jobs["protolyte-static"]
    assert {"target_label": "job", "replacement": "protolyte"} in static["relabel_configs"]
    for target in static["static_configs"][0]["targets"]:
        assert target.startswith("127.0.0.1:")


# --- promtool -------------------------------------------------------------------------


def _promtool(*args: str, cwd: Path = PDIR, stdin: str | None = None) -> subprocess.CompletedProcess[str]:
    assert PROMTOOL is not None
    return subprocess.run(
        [PROMTOOL, *args], cwd=cwd, input=stdin, capture_output=True, text=True, timeout=60, check=False
    )


@needs_promtool
def test_promtool_check_rules() -> None:
    r = _promtool("check", "rules", "rules.yml")
    assert r.returncode == 0, r.stdout + r.stderr
    assert f"SUCCESS: {len(_rules())} rules found" in r.stdout


@needs_promtool
def test_promtool_unit_tests_of_the_alerts() -> None:
    r = _promtool("test", "rules", "rules_test.yml")
    assert r.returncode == 0, r.stdout + r.stderr


@needs_promtool
def test_promtool_rejects_a_broken_rule(tmp_path: Path) -> None:
    # The check above can fail: a syntax error in one expression is reported.
    doc = yaml.safe_load((PDIR / "rules.yml").read_text())
    doc["groups"][0]["rules"][0]["expr"] = "sum by (job (rate(protolyte_http_requests_total[5m]))"
    (tmp_path / "rules.yml").write_text(yaml.safe_dump(doc))
    r = _promtool("check", "rules", "rules.yml", cwd=tmp_path)
    assert r.returncode != 0


@needs_promtool
def test_promtool_check_config(tmp_path: Path) -> None:
    # Debian's Prometheus is built without Kubernetes service discovery, so its promtool
    # rejects kubernetes_sd_configs; check the rest of the file with that job's discovery
    # replaced by a static target (its relabelling still parsed), and accept the original
    # where the full build is installed.
    full = _promtool("check", "config", str(PDIR / "prometheus.yml"))
    if full.returncode == 0:
        return
    assert "kubernetes_sd_configs" in full.stdout + full.stderr, full.stdout + full.stderr
    cfg = yaml.safe_load((PDIR / "prometheus.yml").read_text())
    for job in cfg["scrape_configs"]:
        if job.pop("kubernetes_sd_configs", None) is not None:
            job["static_configs"] = [{"targets": ["127.0.0.1:8000"]}]
    (tmp_path / "prometheus.yml").write_text(yaml.safe_dump(cfg))
    shutil.copy(PDIR / "rules.yml", tmp_path / "rules.yml")
    r = _promtool("check", "config", "prometheus.yml", cwd=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr


@needs_promtool
def test_promtool_check_metrics_on_the_live_exposition() -> None:
    text = live_exposition()
    if text is None:
        pytest.skip("service.app not importable yet")
    r = _promtool("check", "metrics", stdin=text)
    assert r.returncode == 0, r.stdout + r.stderr
    assert r.stdout.strip() == "" and r.stderr.strip() == "", r.stdout + r.stderr


@needs_promtool
def test_dashboard_promql_parses(tmp_path: Path) -> None:
    rules = [
        {"record": f"dashboard:panel_{i}:check", "expr": re.sub(r"\$__rate_interval", "5m", expr)
         .replace("$job", "protolyte").replace("$route", ".*")}
        for i, (_, expr) in enumerate(_dashboard_targets())
    ]
    (tmp_path / "dash.yml").write_text(yaml.safe_dump({"groups": [{"name": "dashboard", "rules": rules}]}))
    r = _promtool("check", "rules", "dash.yml", cwd=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr
