"""Kubernetes manifests (docker/k8s) validated against the Kubernetes API's own JSON
schemas with kubernetes-validate (strict: unknown fields refused), then checked for what
issue 10 asks of the scale-out path: non-root, read-only root filesystem, resources,
liveness /healthz and readiness /readyz through the front, a Service, an autoscaler and a
disruption budget that point at the Deployment."""

from __future__ import annotations

from pathlib import Path

import kubernetes_validate
import pytest
import yaml

K8S = Path(__file__).resolve().parents[2] / "docker" / "k8s"
KUBERNETES_VERSION = "1.30"  # a release still supported by the usual managed offerings


def _docs() -> dict[str, dict]:
    kustomization = yaml.safe_load((K8S / "kustomization.yaml").read_text(encoding="utf-8"))
    out = {}
    for name in kustomization["resources"]:
        for doc in yaml.safe_load_all((K8S / name).read_text(encoding="utf-8")):
            out[doc["kind"]] = doc
    return out


DOCS = _docs()


def test_every_manifest_file_is_listed():
    listed = set(yaml.safe_load((K8S / "kustomization.yaml").read_text())["resources"])
    assert listed == {p.name for p in K8S.glob("*.yaml")} - {"kustomization.yaml"}
    assert set(DOCS) == {"Deployment", "Service", "HorizontalPodAutoscaler",
                         "PodDisruptionBudget"}


@pytest.mark.parametrize("kind", sorted(DOCS))
def test_manifest_is_valid_for_kubernetes(kind):
    kubernetes_validate.validate(DOCS[kind], KUBERNETES_VERSION, strict=True)


def test_validator_refuses_a_broken_manifest():
    # Control: the validator really checks (an unknown field and a wrong type).
    broken = yaml.safe_load(yaml.safe_dump(DOCS["Deployment"]))
    broken["spec"]["replicas"] = "two"
    with pytest.raises(kubernetes_validate.ValidationError):
        kubernetes_validate.validate(broken, KUBERNETES_VERSION, strict=True)
    extra = yaml.safe_load(yaml.safe_dump(DOCS["Service"]))
    extra["spec"]["colour"] = "red"
    with pytest.raises(kubernetes_validate.ValidationError):
        kubernetes_validate.validate(extra, KUBERNETES_VERSION, strict=True)


def _container():
    (container,) = DOCS["Deployment"]["spec"]["template"]["spec"]["containers"]
    return container


def test_pod_runs_unprivileged_on_a_read_only_root():
    pod = DOCS["Deployment"]["spec"]["template"]["spec"]
    assert pod["securityContext"]["runAsNonRoot"] is True
    assert pod["securityContext"]["runAsUser"] == 10001  # docker/Dockerfile's user
    sc = _container()["securityContext"]
    assert sc["readOnlyRootFilesystem"] is True and sc["allowPrivilegeEscalation"] is False
    assert sc["capabilities"]["drop"] == ["ALL"]
    mounts = {m["mountPath"] for m in _container()["volumeMounts"]}
    assert "/tmp" in mounts  # the front's runtime directory and the metrics files


def test_resources_and_probes():
    res = _container()["resources"]
    for key in ("cpu", "memory"):
        assert key in res["requests"] and key in res["limits"]
    ports = {p["name"]: p["containerPort"] for p in _container()["ports"]}
    assert ports == {"http": 8000, "metrics": 9100}
    assert _container()["livenessProbe"]["httpGet"] == {"path": "/healthz", "port": "http"}
    assert _container()["readinessProbe"]["httpGet"] == {"path": "/readyz", "port": "http"}
    # The pod runs the image's own command: the front before gunicorn.
    assert "command" not in _container() and "args" not in _container()


def test_service_hpa_and_pdb_select_the_deployment():
    labels = DOCS["Deployment"]["spec"]["template"]["metadata"]["labels"]
    assert DOCS["Deployment"]["spec"]["selector"]["matchLabels"].items() <= labels.items()
    assert DOCS["Service"]["spec"]["selector"].items() <= labels.items()
    assert DOCS["PodDisruptionBudget"]["spec"]["selector"]["matchLabels"].items() <= \
        labels.items()
    target = DOCS["HorizontalPodAutoscaler"]["spec"]["scaleTargetRef"]
    assert (target["kind"], target["name"]) == ("Deployment",
                                                DOCS["Deployment"]["metadata"]["name"])
    hpa = DOCS["HorizontalPodAutoscaler"]["spec"]
    assert 1 <= hpa["minReplicas"] < hpa["maxReplicas"]
    assert DOCS["PodDisruptionBudget"]["spec"]["minAvailable"] < hpa["minReplicas"] + 1
    ports = {p["targetPort"] for p in DOCS["Service"]["spec"]["ports"]}
    assert ports == {"http", "metrics"}
