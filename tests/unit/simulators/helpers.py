"""Writes small machine configurations and scenario files for the simulator tests (real files).

``CWRU_BEARING`` is the drive-end bearing of the Case Western Reserve University Bearing Data Center rig
(9 balls, 0.3126 in, pitch 1.537 in, contact angle 0; references.md section 2, Ex. 1: geometry from the
data center's bearing page, secondary). Its defect multiples, computed from the formulas in Randall &
Antoni 2011 (references.md): BPFI 5.41522, BPFO 3.58478, FTF 0.39831, BSF 2.35672, 2xBSF 4.71344.
"""

from __future__ import annotations

from pathlib import Path

CWRU_BEARING = {"elements": 9, "element_diameter": 0.3126, "pitch_diameter": 1.537, "diameter_unit": "in"}
CWRU_ORDERS = {"bpfi": 5.41522, "bpfo": 3.58478, "ftf": 0.39831, "bsf": 2.35672, "two_bsf": 4.71344}

QUIET = {  # a healthy state with nothing in it, so a test can switch on one component at a time
    "unbalance_mm_s": 0.0, "misalignment_mm_s": 0.0, "looseness_mm_s": 0.0, "blade_pass_mm_s": 0.0,
    "noise_m_s2": 0.0, "speed_drift_pct": 0.0,
}


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    return repr(v)


def write_config(directory: Path, *, rpm: float = 1797.0, fs_hz: float = 48000.0, blades: int | None = None,
                 bearing: dict | None = None, points: list[dict] | None = None, name: str = "machine.toml",
                 speed: dict | None = None, channels: int | None = None) -> Path:
    """A one-machine configuration (id ``m1``) with bearing ``b1`` and points on it."""
    bearing = dict(CWRU_BEARING if bearing is None else bearing)
    points = points or [
        {"id": "p1", "bearing": "b1", "sensor": {"channel": 0, "sensitivity_mv_per_g": 100.0}},
    ]
    n_channels = channels or max(p["sensor"]["channel"] for p in points) + 1
    speed = speed or {"mode": "fixed", "rpm": rpm}
    lines = [
        "[acquisition]", f"sample_rate_hz = {fs_hz!r}", f"channels = {n_channels}", "",
        "[[machines]]", 'id = "m1"',
    ]
    if blades is not None:
        lines.append(f"blades = {blades}")
    lines += ["[machines.speed]"] + [f"{k} = {_toml_value(v)}" for k, v in speed.items()]
    lines += ["[[machines.bearings]]", 'id = "b1"'] + [f"{k} = {_toml_value(v)}" for k, v in bearing.items()]
    for p in points:
        lines.append("[[machines.points]]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in p.items()]
    lines += ["[machines.overall]", f"high_hz = {min(1000.0, 0.4 * fs_hz)!r}"]
    path = directory / name
    path.write_text("\n".join(lines) + "\n")
    return path


def write_scenario(directory: Path, config: Path | str, *, healthy: dict | None = None, structure: dict | None = None,
                   chain: dict | None = None, changes: list[dict] = (), duration_days: float = 2.0, seed: int = 5, cadence_s: float = 3600.0,
                   name: str = "scenario.toml", extra_header: str = "") -> Path:
    """A scenario on ``config`` (written relative to the scenario file when it is a Path)."""
    cfg = str(config) if isinstance(config, str) else config.name
    lines = [
        "[scenario]", 'name = "test"', f"config = {_toml_value(cfg)}", f"duration_days = {duration_days!r}",
        f"cadence_s = {cadence_s!r}", f"seed = {seed}",
    ]
    if extra_header:
        lines.append(extra_header)
    lines.append("[healthy]")
    lines += [f"{k} = {_toml_value(v)}" for k, v in (QUIET if healthy is None else healthy).items()]
    if structure:
        lines.append("[structure]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in structure.items()]
    if chain:
        lines.append("[chain]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in chain.items()]
    for ch in changes:
        lines.append("[[change]]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in ch.items()]
    path = directory / name
    path.write_text("\n".join(lines) + "\n")
    return path


def renderer_for(tmp_path: Path, *, config_kwargs: dict | None = None, **scenario_kwargs):
    from rotorwatch.simulators.render import ScenarioRenderer
    from rotorwatch.simulators.scenario import load_scenario

    cfg = write_config(tmp_path, **(config_kwargs or {}))
    return ScenarioRenderer(load_scenario(write_scenario(tmp_path, cfg, **scenario_kwargs)))
