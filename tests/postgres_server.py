"""A throwaway PostgreSQL server for the store's tests, from the system's own binaries.

``INHIBKIN_TEST_POSTGRES_URL`` names a server to use instead. Otherwise ``initdb`` and
``pg_ctl`` are looked for on PATH and in Debian's ``/usr/lib/postgresql/<version>/bin``;
a cluster is made in a temporary folder (trust authentication, Unix socket only, no TCP
port), started, and removed at the end of the test session. PostgreSQL refuses to run as
root, so under root the cluster belongs to the ``postgres`` user and the commands run
through ``runuser``. Where none of this works, :func:`start` returns the reason, and the
tests skip with it.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import subprocess
import tempfile
from pathlib import Path

# initdb and a server start take a few seconds; a stuck one is not waited for longer.
_COMMAND_SECONDS = 60


def _binary(name) -> str | None:
    found = shutil.which(name)
    if found:
        return found
    candidates = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{name}"))
    return candidates[-1] if candidates else None


class Server:
    """A running throwaway cluster: ``url`` to connect, ``stop()`` to end it."""

    def __init__(self, folder: Path, pg_ctl: str, prefix: list[str]):
        self.folder, self._pg_ctl, self._prefix = folder, pg_ctl, prefix
        self.url = f"postgresql+psycopg://postgres@/postgres?host={folder}"

    def stop(self) -> None:
        subprocess.run([*self._prefix, self._pg_ctl, "-D", str(self.folder / "data"), "-m",
                        "immediate", "stop"], capture_output=True, timeout=_COMMAND_SECONDS)
        shutil.rmtree(self.folder, ignore_errors=True)


def start() -> tuple[Server | None, str]:
    """(a started server, "") or (None, why none could be started)."""
    initdb, pg_ctl = _binary("initdb"), _binary("pg_ctl")
    if not initdb or not pg_ctl:
        return None, "no PostgreSQL binaries (initdb, pg_ctl) on this machine"
    try:
        import psycopg  # noqa: F401
    except ImportError:
        return None, "psycopg is not installed (pip install 'inhibkin[postgresql]')"
    prefix: list[str] = []
    folder = Path(tempfile.mkdtemp(prefix="inhibkin-pg-"))
    if os.geteuid() == 0:
        runuser = shutil.which("runuser")
        try:
            owner = pwd.getpwnam("postgres")
        except KeyError:
            return None, "running as root and there is no 'postgres' user to run the server"
        if not runuser:
            return None, "running as root and runuser is missing"
        os.chown(folder, owner.pw_uid, owner.pw_gid)
        prefix = [runuser, "-u", "postgres", "--"]
    data = folder / "data"
    steps = [
        [*prefix, initdb, "-D", str(data), "-U", "postgres", "--auth=trust", "-E", "UTF8",
         "--no-sync"],
        [*prefix, pg_ctl, "-D", str(data), "-w", "-t", str(_COMMAND_SECONDS), "-l",
         str(folder / "server.log"), "-o",
         f"-c listen_addresses='' -c unix_socket_directories='{folder}' -c fsync=off",
         "start"],
    ]
    for step in steps:
        try:
            done = subprocess.run(step, capture_output=True, text=True,
                                  timeout=_COMMAND_SECONDS)
        except (OSError, subprocess.TimeoutExpired) as err:
            shutil.rmtree(folder, ignore_errors=True)
            return None, f"{Path(step[len(prefix)]).name} failed: {err}"
        if done.returncode != 0:
            log = (folder / "server.log")
            detail = (done.stderr or done.stdout or "").strip()[-300:]
            if log.is_file():
                detail += " " + log.read_text(errors="replace")[-300:]
            shutil.rmtree(folder, ignore_errors=True)
            return None, f"{Path(step[len(prefix)]).name} failed: {detail}"
    return Server(folder, pg_ctl, prefix), ""
