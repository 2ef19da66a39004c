"""The daemon's machines at run time: each machine's pipeline, window length and input channels.

A :class:`MachineRuntime` is built per configured machine (:func:`build_runtimes`); a reload keeps
the runtime (and so the pipeline with its learned baselines) of a machine whose settings and sample
rate did not change. :func:`ring_layout` gives the ring buffer each input channel needs.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Protocol

import numpy as np

from ..alarms.monitor import MachineMonitor
from ..alarms.records import AlarmEvent, MachineUpdate
from ..logs import fields
from ..settings.models import Config, Machine
from .trend_seed import seed_projections

log = logging.getLogger(__name__)


class Pipeline(Protocol):
    """What the daemon needs of a machine's pipeline (:class:`rotorwatch.pipeline.MachinePipeline`)."""

    monitor: MachineMonitor

    def step(self, time_s: float, blocks_v: dict[str, np.ndarray | None], rpm: float | None = None, *,
             rpm_source: str | None = None, tach_pulses_s: np.ndarray | None = None) -> MachineUpdate: ...

    def acknowledge(self, point_id: str | None = None, value: str | None = None) -> list[AlarmEvent]: ...

    def relearn(self, point_id: str | None = None, value: str | None = None) -> list[str]: ...

    def close(self) -> None: ...


PipelineFactory = Callable[[Config, Machine, Path], Pipeline]


def default_pipeline_factory(config: Config, machine: Machine, state_dir: Path) -> Pipeline:
    from ..pipeline import MachinePipeline

    # spectra are kept for the status page and the evidence snapshots
    return MachinePipeline(config, machine, state_dir=state_dir, keep_spectra=True)


@dataclass
class MachineRuntime:
    machine: Machine
    pipeline: Pipeline
    n_window: int
    channels: dict[str, int]  # point -> input channel
    tach_channel: int | None
    last_update: MachineUpdate | None = None
    last_blocks: dict[str, np.ndarray] | None = None  # the windows of the last analyzed update (volts)


def build_runtimes(config: Config, state_dir: Path, factory: PipelineFactory,
                   keep: Mapping[str, MachineRuntime] | None = None,
                   kept_rate_hz: float | None = None) -> dict[str, MachineRuntime]:
    """One runtime per machine; ``keep``: the running ones, kept where the machine and the sample
    rate (``kept_rate_hz``) are unchanged. ConfigError from a pipeline propagates."""
    keep = keep or {}
    fs = config.acquisition.sample_rate_hz
    out = {}
    for m in config.machines:
        old = keep.get(m.id)
        if old is not None and old.machine == m and kept_rate_hz == fs:
            out[m.id] = old
            continue
        pipeline = factory(config, m, state_dir)
        if isinstance(getattr(pipeline, "monitor", None), MachineMonitor):
            seed_projections(pipeline.monitor, state_dir)  # the values' recent trends, from the trend store
        n = max(16, int(round(m.analysis.window_s * fs)))
        out[m.id] = MachineRuntime(m, pipeline, n, {p.id: p.sensor.channel for p in m.points},
                                   m.speed.tach_channel if m.speed.mode == "tach" else None)
    return out


def ring_layout(config: Config, runtimes: Mapping[str, MachineRuntime]) -> dict[int, int]:
    """input channel -> ring capacity (the window plus two blocks of slack)."""
    layout: dict[int, int] = {}
    for rt in runtimes.values():
        chans = list(rt.channels.values()) + ([rt.tach_channel] if rt.tach_channel is not None else [])
        for ch in chans:
            layout[ch] = max(layout.get(ch, 0), rt.n_window + 2 * config.acquisition.block_frames)
    return layout


def close_pipeline(rt: MachineRuntime) -> None:
    """Save the machine's state (baselines); a failure is logged, never raised."""
    try:
        rt.pipeline.close()
    except Exception as e:  # noqa: BLE001 - saving baselines must not stop shutdown
        log.warning("error saving machine state", extra=fields(machine=rt.machine.id, error=str(e)))
