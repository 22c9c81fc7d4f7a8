"""Small case builders shared by the evaluator-versus-reference tests (test data, not demo
data: every figure is a test input)."""

from __future__ import annotations

import copy

from commitadvisor.case import parse_case

BASE = {
    "schema_version": 1,
    "title": "reference check",
    "workload": {"kind": "open", "commit_rate_per_s": 1000.0, "log_bytes_per_commit": 100},
    "recovery": {
        "process_crash": {"per_year": 4.0, "loss_window_s": 0.0},
        "host_crash": {"per_year": 1.0, "loss_window_s": 0.0},
        "device_loss": {"per_year": 0.05, "loss_window_s": 0.0},
    },
    "goals": {"commit_p99_ms": 10.0},
    "devices": {
        "a": {"cache": "power_loss_protected", "bandwidth_mb_per_s": 1000.0,
              "profile_block_bytes": 8192,
              "latency": {"normal": {"kind": "lognormal", "p50_ms": 1.0, "p99_ms": 10.0}}},
        "b": {"cache": "power_loss_protected", "bandwidth_mb_per_s": 1000.0,
              "profile_block_bytes": 8192,
              "latency": {"normal": {"kind": "lognormal", "p50_ms": 0.3, "p99_ms": 2.0}}},
    },
    "strategies": [{"kind": "synchronous", "device": "a"}],
}


def make_case(workload=None, strategies=None, device_a=None, device_b=None):
    d = copy.deepcopy(BASE)
    if workload:
        d["workload"] = {**({} if "kind" in workload else d["workload"]), **workload}
        if workload.get("kind") == "closed":
            d["workload"].pop("commit_rate_per_s", None)
    if strategies:
        d["strategies"] = strategies
    if device_a:
        d["devices"]["a"].update(device_a)
    if device_b:
        d["devices"]["b"].update(device_b)
    return parse_case(d, "reference-check")
