"""SIGINT sent to a child `bigpanel fit` at several moments: exit 130, one line, no file (issue 19 item 11).

Common practice: a Unix command interrupted by SIGINT exits 128 + 2.
"""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def big_panel(tmp_path_factory):
    path = tmp_path_factory.mktemp("interrupt") / "p.parquet"
    con = duckdb.connect()
    con.execute(f"""COPY (SELECT i // 3 AS g, (i * 7) % 997 AS h, sin(i) AS x,
                    cos(i * 3) + 0.5 * sin(i) AS y FROM range(3000000) r(i)) TO '{path}' (FORMAT parquet)""")
    con.close()
    return path


def _start(path: Path, save: Path) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    code = "from bigpanel.cli import main; import sys; sys.argv[0] = 'bigpanel'; print('ready', flush=True); main()"
    return subprocess.Popen(
        [sys.executable, "-c", code, "fit", str(path), "y ~ x", "--fe", "g", "--fe", "h", "--cluster", "h",
         "--save", str(save), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)


@pytest.mark.parametrize("delay", [0.1, 0.3, 1.0, 2.5])
def test_sigint_exits_130_and_writes_nothing(big_panel, tmp_path, delay):
    save = tmp_path / "fit.json"
    proc = _start(big_panel, save)
    assert proc.stdout.readline().strip() == "ready"  # past the imports: the handler is next
    time.sleep(delay)
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    if proc.returncode == 0:
        pytest.skip(f"the fit finished within {delay} s, before the signal")
    assert proc.returncode == 130, err
    assert err.strip() == "bigpanel: interrupted; nothing was written"
    assert not save.exists() and not list(tmp_path.glob(".*.tmp"))


def test_sigint_while_the_files_module_loads():
    # The signal lands while bigpanel.output.files is being imported (it is in sys.modules, its
    # body not yet run): the handler must still answer with one line and 130, not an AttributeError.
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    code = ("import sys, types; from bigpanel.command import FILES_MODULE, interrupted; "
            "sys.modules[FILES_MODULE] = types.ModuleType(FILES_MODULE); interrupted(2, None)")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=60)
    assert proc.returncode == 130, proc.stderr
    assert proc.stderr.strip() == "bigpanel: interrupted; nothing was written"


def test_sigint_while_the_command_starts(big_panel, tmp_path):
    # The signal lands while the command's modules are still loading (typer, rich: tens of
    # milliseconds after the entry point runs): the early handler answers the same way.
    save = tmp_path / "fit.json"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    code = ("import sys; sys.argv[0] = 'bigpanel'; print('up', flush=True); "
            "from bigpanel.command import main; main()")
    proc = subprocess.Popen(
        [sys.executable, "-c", code, "fit", str(big_panel), "y ~ x", "--fe", "g", "--save", str(save), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    assert proc.stdout.readline().strip() == "up"
    time.sleep(0.03)
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert err.strip() == "bigpanel: interrupted; nothing was written"
    assert not save.exists()


def test_an_interrupt_removes_the_files_being_written(tmp_path):
    # A SIGINT while an output is half-written (inside atomic_path) leaves no temporary behind:
    # the handler finds the files module by its name (it broke silently when the module moved).
    code = ("import os, signal, sys; from bigpanel.command import interrupted; "
            "from bigpanel.output.files import atomic_path; signal.signal(signal.SIGINT, interrupted)\n"
            "with atomic_path(sys.argv[1]) as tmp:\n"
            "    tmp.write_text('half'); print(tmp, flush=True); os.kill(os.getpid(), signal.SIGINT)\n")
    target = tmp_path / "out.json"
    proc = subprocess.run([sys.executable, "-c", code, str(target)], capture_output=True, text=True, timeout=60,
                          env=dict(os.environ, PYTHONPATH=str(ROOT)))
    assert proc.returncode == 130 and proc.stderr.strip() == "bigpanel: interrupted; nothing was written"
    written = proc.stdout.strip()
    assert written and not os.path.exists(written) and not target.exists()
