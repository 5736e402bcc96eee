"""dashboard stage (see DESIGN.md): Streamlit pages over the published tables.

``launch`` serves ``app.py``; the pages only read published Parquet tables and
write nothing but the dashboard's own SQLite file (plan and outcomes).
"""

from __future__ import annotations

import logging
import os
import signal
import subprocess
import sys
from pathlib import Path

from tracktrue.store import STORE_ENV, Store

log = logging.getLogger(__name__)

APP = Path(__file__).with_name("app.py")
LOCAL_HOSTS = frozenset({"127.0.0.1", "localhost", "::1"})
#: Our own look, passed as Streamlit options.
THEME = {
    "theme.base": "light",
    "theme.primaryColor": "#2a7f72",
    "theme.backgroundColor": "#fbfaf7",
    "theme.secondaryBackgroundColor": "#eef1ec",
    "theme.textColor": "#1f2a30",
}


def streamlit_command(port: int, host: str) -> list[str]:
    """The ``python -m streamlit run`` command line for this store."""
    options = {
        "server.port": str(port),
        "server.address": host,
        "server.headless": "true",
        "browser.gatherUsageStats": "false",
        "server.fileWatcherType": "none",
        "client.toolbarMode": "minimal",
        **THEME,
    }
    return [sys.executable, "-m", "streamlit", "run", str(APP),
            *(f"--{k}={v}" for k, v in options.items())]


def launch(store: Store, port: int = 8501, host: str = "127.0.0.1") -> int:
    """Serve the dashboard until interrupted; returns Streamlit's exit code."""
    if host not in LOCAL_HOSTS:
        print(f"warning: serving on {host}:{port}. The dashboard has no login: anyone who can reach "
              "this address can read the fleet's data and change the workshop plan.", file=sys.stderr)
    env = {**os.environ, STORE_ENV: str(Path(store.root).resolve())}
    print(f"tracktrue dashboard: store {env[STORE_ENV]}, open http://{host}:{port}/", file=sys.stderr)
    proc = subprocess.Popen(streamlit_command(port, host), env=env)
    # a service manager stops us with SIGTERM: pass it on, or the server outlives us on its port
    previous = signal.signal(signal.SIGTERM, lambda signum, frame: proc.terminate())
    try:
        return proc.wait()
    except KeyboardInterrupt:
        proc.terminate()
        proc.wait(timeout=10)
        return 130
    finally:
        signal.signal(signal.SIGTERM, previous)
