"""Files that hold secrets, and whether every user on the box can read them.

The configuration file holds no secrets (an inline password is refused when it loads); it names the
files that do: the broker password (``mqtt.password_file``), the MQTT client key
(``mqtt.client_key_file``), the metrics endpoint's TLS key (``metrics.tls_key_file``) and the status
page token (``status_page.token_file``). :func:`readable_by_all` lists those that are world-readable,
so the daemon can say so at start and after a reload (one WARNING line each, naming the file and the
fix). Group-readable is fine: the install guide keeps them ``0640`` with group ``rotorwatch``.
Missing files are not reported here; the part that opens them reports that as a one-line error.
"""

from __future__ import annotations

import stat
from pathlib import Path

from ..settings.models import Config


def secret_files(config: Config, config_dir: Path) -> list[tuple[str, Path]]:
    """``(setting, path)`` of every file the configuration names that holds a secret."""
    named: list[tuple[str, str | None]] = []
    if config.mqtt is not None:
        named += [("mqtt.password_file", config.mqtt.password_file), ("mqtt.client_key_file", config.mqtt.client_key_file)]
    if config.metrics is not None:
        named.append(("metrics.tls_key_file", config.metrics.tls_key_file))
    if config.status_page is not None:
        named.append(("status_page.token_file", config.status_page.token_file))
    out = []
    for setting, name in named:
        if name:
            p = Path(name).expanduser()
            out.append((setting, p if p.is_absolute() else config_dir / p))
    return out


def readable_by_all(config: Config, config_dir: Path) -> list[tuple[str, Path, int]]:
    """``(setting, path, mode)`` of the secret files any user may read (the "others" read bit)."""
    out = []
    for setting, path in secret_files(config, config_dir):
        try:
            mode = stat.S_IMODE(path.stat().st_mode)
        except OSError:
            continue
        if mode & stat.S_IROTH:
            out.append((setting, path, mode))
    return out


def warning_line(setting: str, path: Path, mode: int) -> str:
    """The one-line warning for a world-readable secret file, with the fix."""
    return (f"{setting} = {str(path)!r} is readable by every user on this box (mode {mode:04o}); "
            f"restrict it: chmod 600 {path} (or chmod 640 with the daemon's group)")
