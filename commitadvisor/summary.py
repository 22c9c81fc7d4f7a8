"""What a case says, in figures: the summary that ``check`` prints (pure, no I/O)."""

from __future__ import annotations

from dataclasses import dataclass

from commitadvisor.case import NORMAL, Case, DualDevice, regime_time_shares, strategy_name

__all__ = ["CaseSummary", "DeviceRow", "summarise"]


@dataclass(frozen=True)
class DeviceRow:
    device: str
    regime: str
    p50_ms: float
    p99_ms: float
    mean_ms: float
    stalls_per_s: float
    stall_p50_ms: float | None
    bandwidth_mb_per_s: float
    counts_as_durable: bool
    cache: str
    profile_measures: str


@dataclass(frozen=True)
class CaseSummary:
    title: str
    workload: str
    regimes: tuple[tuple[str, float, str], ...]  # name, time share, when
    devices: tuple[DeviceRow, ...]
    strategies: tuple[tuple[str, str], ...]  # name, settings in words
    stack: tuple[str, ...]
    notes: tuple[str, ...]


def _workload_words(case: Case) -> str:
    w = case.workload
    if w.kind == "closed":
        text = (f"closed: {w.sessions} sessions, think time {w.think_time_ms:g} ms "
                f"({w.think_time_distribution})")
    else:
        text = f"open: {case.commit_rate_per_s():g} commits/s (Poisson arrivals)"
    text += f", {w.log_bytes_per_commit} log bytes per commit"
    if w.cpus:
        text += (f"; host {w.cpus} CPUs, {w.cpu_ms_per_commit:g} ms CPU per commit, "
                 f"{w.other_cpu_utilisation:.0%} taken by other work")
    return text


def _settings(s: object) -> str:
    kind = s.kind  # type: ignore[attr-defined]
    if kind == "synchronous":
        how = "natural group commit" if s.grouping == "natural" else "one flush per commit"  # type: ignore[attr-defined]
        return f"wait for the flush on {s.device} ({how})"  # type: ignore[attr-defined]
    if kind == "batched":
        return (f"flush on {s.device} after {s.gather_window_ms:g} ms or "  # type: ignore[attr-defined]
                f"{s.gather_target_commits} pending commits")  # type: ignore[attr-defined]
    if kind == "deferred":
        return (f"acknowledge from the log buffer; flush {s.device} every "  # type: ignore[attr-defined]
                f"{s.flush_every_ms:g} ms, buffer {s.buffer_bytes / 2**20:g} MiB")  # type: ignore[attr-defined]
    assert isinstance(s, DualDevice)
    return (f"write to {s.devices[0]} and {s.devices[1]}, acknowledge after the "
            f"{s.ack_after}; shared-cause share {s.shared_cause_share:g}")


def summarise(case: Case) -> CaseSummary:
    """The figures ``check`` shows: regimes with time shares, device percentiles per regime."""
    from commitadvisor.latency import from_entry

    shares = regime_time_shares(case)
    regimes = [(NORMAL, shares[NORMAL], "outside the other regimes")]
    for r in case.regimes:
        when = f"{r.duration_s:g} s every {r.period_s:g} s from {r.offset_s:g} s"
        regimes.append((r.name, shares[r.name], when))
    rows = []
    for name, dev in case.devices.items():
        for reg in case.regime_names():
            if reg != NORMAL and reg not in dev.latency and reg not in dev.stalls \
                    and reg not in dev.bandwidth_mb_per_s_during:
                continue
            prof = from_entry(dev.latency.get(reg, dev.latency[NORMAL]))
            st = dev.stalls.get(reg)
            rows.append(DeviceRow(
                device=name, regime=reg,
                p50_ms=float(prof.quantile(0.5)), p99_ms=float(prof.quantile(0.99)),
                mean_ms=prof.mean_ms,
                stalls_per_s=st.per_s if st else 0.0,
                stall_p50_ms=float(from_entry(st.duration).quantile(0.5)) if st else None,
                bandwidth_mb_per_s=dev.bandwidth_bytes_per_s(reg) / 1e6,
                counts_as_durable=dev.counts_as_durable, cache=dev.cache,
                profile_measures=dev.profile_measures,
            ))
    notes = []
    for name, dev in case.devices.items():
        if not dev.counts_as_durable:
            notes.append(f"device {name}: volatile write cache not declared as honouring "
                         "flushes; its completed flushes do not count as durable")
        if dev.profile_measures == "commit_latency":
            notes.append(f"device {name}: its profile is commit latency seen in production "
                         "(queueing and CPU already inside); it is used as the response "
                         "time itself, not fed through the writer model again")
    stack = tuple(f"{t.name}: {t.threads} threads, {t.calls_per_request:g} calls per request"
                  for t in case.stack)
    return CaseSummary(
        title=case.title,
        workload=_workload_words(case),
        regimes=tuple(regimes),
        devices=tuple(rows),
        strategies=tuple((strategy_name(s), _settings(s)) for s in case.strategies),
        stack=stack,
        notes=tuple(notes),
    )
