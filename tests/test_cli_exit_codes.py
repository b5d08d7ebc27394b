"""The one table of exit codes, through the real command line in a subprocess.

Every user mistake listed here must give the table's code (monitor/exitcodes.py), exactly one
line ``eddyvigil COMMAND: ...`` on standard error and no Python traceback; the same fault gives
the same code in every command. Sockets are real, on 127.0.0.1, with free ports.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time

import pytest
import zmq
from conftest import REPO_DIR, TESTS_DIR, free_port, tcp_endpoint, wait_for

from eddyvigil.monitor.exitcodes import COMMAND_CODES, MEANINGS, ExitCode
from eddyvigil.monitor.recorder import Recorder


def _env():
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join([str(REPO_DIR), str(TESTS_DIR)])
    return env


def cli(*args, timeout=120.0):
    """Run ``eddyvigil ARGS``; returns (code, stdout, stderr)."""
    p = subprocess.run(
        [sys.executable, "-m", "eddyvigil.monitor", *args],
        capture_output=True, text=True, timeout=timeout, env=_env(), stdin=subprocess.DEVNULL,
    )
    return p.returncode, p.stdout, p.stderr


def refused(command, expected, *args, words=()):
    code, out, err = cli(command, *args)
    assert code == int(expected), err
    assert "Traceback" not in err, err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith(f"eddyvigil {command}: "), err
    for w in words:
        assert w in lines[0], err
    return out, lines[0]


def _recording(path):
    rec = Recorder(path)
    rec.write([b"probe-a", b"{}"], 0.0, rejected_reason="missing_field")
    rec.close()
    return path


@pytest.mark.parametrize("command", sorted(COMMAND_CODES))
def test_every_help_lists_its_codes_from_the_one_table(command):
    code, out, err = cli(command, "--help")
    assert code == 0, err
    block = out.split("exit codes:", 1)[1]
    for c in COMMAND_CODES[command]:
        words = MEANINGS[ExitCode(c)].split()[:3]
        assert f"\n  {c:<4d}{' '.join(words)}" in block, (command, c)


def test_record_on_a_file_or_an_impossible_path_is_refused(tmp_path):
    target = tmp_path / "not-a-folder"
    target.write_text("x")
    ep = tcp_endpoint()
    refused("watch", ExitCode.CANNOT_WRITE, "--connect", ep, "--no-dashboard",
            "--record", str(target), words=("is a file",))
    refused("watch", ExitCode.CANNOT_WRITE, "--connect", ep, "--no-dashboard",
            "--record", str(target / "rec"), words=("which is a file",))


def test_summary_into_a_missing_folder_is_refused(tmp_path):
    for command, extra in (("watch", ["--connect", tcp_endpoint()]), ("replay", [])):
        rec = [str(_recording(tmp_path / f"rec-{command}"))] if command == "replay" else []
        refused(command, ExitCode.CANNOT_WRITE, *rec, *extra, "--no-dashboard",
                "--summary", str(tmp_path / "missing" / "s.jsonl"), words=("does not exist",))


def test_existing_summary_has_the_code_of_an_existing_recording(tmp_path):
    old = tmp_path / "s.jsonl"
    old.write_text('{"earlier": 1}\n')
    _, line = refused("watch", ExitCode.OUTPUT_EXISTS, "--connect", tcp_endpoint(),
                      "--no-dashboard", "--summary", str(old), words=("--summary-mode",))
    rec = _recording(tmp_path / "rec")
    refused("watch", ExitCode.OUTPUT_EXISTS, "--connect", tcp_endpoint(), "--no-dashboard",
            "--record", str(rec), words=("--append",))
    refused("replay", ExitCode.OUTPUT_EXISTS, str(rec), "--no-dashboard",
            "--summary", str(old))
    refused("demo", ExitCode.OUTPUT_EXISTS, "--no-browser", "--port", "0",
            "--summary", str(old))
    assert old.read_text() == '{"earlier": 1}\n'


@pytest.mark.parametrize("mode", ["append", "overwrite"])
def test_summary_mode_appends_or_overwrites_when_asked(tmp_path, mode):
    old = tmp_path / "s.jsonl"
    old.write_text('{"earlier": 1}\n')
    rec = _recording(tmp_path / "rec")
    code, out, err = cli("replay", str(rec), "--no-dashboard", "--quiet",
                         "--summary", str(old), "--summary-mode", mode)
    assert code == 0, err
    lines = old.read_text().splitlines()
    assert (lines[0] == '{"earlier": 1}') is (mode == "append")
    assert '"kind": "run"' in lines[-1]


def test_missing_recording_folder_has_one_code_for_export_and_replay(tmp_path):
    missing = str(tmp_path / "nothing")
    refused("export", ExitCode.NO_RECORDING, missing, "--to", "npz", words=("no such folder",))
    refused("replay", ExitCode.NO_RECORDING, missing, "--no-dashboard",
            words=("no such folder",))
    (tmp_path / "empty").mkdir()
    refused("export", ExitCode.NO_RECORDING, str(tmp_path / "empty"), "--to", "npz")
    refused("replay", ExitCode.NO_RECORDING, str(tmp_path / "empty"), "--no-dashboard")


def test_port_in_use_has_one_code_for_simulate_and_watch():
    ctx = zmq.Context()
    holder = ctx.socket(zmq.PULL)
    holder.setsockopt(zmq.LINGER, 0)
    endpoint = tcp_endpoint()
    holder.bind(endpoint)
    try:
        refused("simulate", ExitCode.ADDRESS_IN_USE, "--bind", endpoint, "--quiet",
                words=("in use",))
        refused("watch", ExitCode.ADDRESS_IN_USE, "--bind", endpoint, "--no-dashboard",
                "--quiet", words=("in use",))
    finally:
        holder.close(linger=0)
        ctx.term()


def test_replay_with_its_dashboard_port_in_use_names_itself_and_writes_nothing(tmp_path):
    rec = _recording(tmp_path / "rec")
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        port = taken.getsockname()[1]
        out, line = refused("replay", ExitCode.ADDRESS_IN_USE, str(rec), "--port", str(port),
                            words=("in use", "--port"))
    assert out == ""  # no run line of a replay that never ran


@pytest.mark.parametrize(
    "endpoint, words",
    [
        ("tcp://127.0.0.1:99999", "outside 1-65535"),
        ("tcp://127.0.0.1:0", "outside 1-65535"),
        ("tcp://no-such-host.invalid:5555", "unknown host"),
        ("tcp://300.1.2.3:5555", "not a host name"),
        ("tcp://127.0.0.1", "needs a host and a port"),
    ],
)
def test_bad_ports_and_hosts_are_refused_at_start(endpoint, words):
    refused("watch", ExitCode.ENDPOINT, "--connect", endpoint, "--no-dashboard", words=(words,))


def test_bad_dashboard_port_is_a_command_line_error():
    code, _, err = cli("watch", "--connect", tcp_endpoint(), "--port", "70000")
    assert code == ExitCode.USAGE and "outside 1-65535" in err and "Traceback" not in err


def test_nobody_publishing_is_said_once_with_what_to_check(tmp_path):
    """Nothing listens at the address: one plain notice after --no-publisher-after, no
    repeated 'waiting' lines; SIGTERM still ends the run normally."""
    endpoint = f"tcp://127.0.0.1:{free_port()}"
    err_path = tmp_path / "watch.err"
    with open(err_path, "wb") as err:
        p = subprocess.Popen(
            [sys.executable, "-m", "eddyvigil.monitor", "watch", "--connect", endpoint,
             "--no-dashboard", "--no-publisher-after", "1"],
            stdout=subprocess.DEVNULL, stderr=err, env=_env(),
        )
    try:
        wait_for(lambda: "nobody is publishing" in err_path.read_text(), timeout=60,
                 what="the no-publisher notice")
        time.sleep(2.5)  # a few more ticks: the notice must not repeat
        p.send_signal(signal.SIGTERM)
        assert p.wait(timeout=30) == 0
    finally:
        if p.poll() is None:
            p.kill()
            p.wait(timeout=10)
    text = err_path.read_text()
    assert text.count("nobody is publishing") == 1, text
    assert endpoint in text and "publisher started" in text and "firewall" in text
    assert "waiting for data" not in text and "Traceback" not in text


def test_outputs_into_missing_folders_have_one_code_in_every_command(tmp_path):
    rec = _recording(tmp_path / "rec")
    refused("export", ExitCode.CANNOT_WRITE, str(rec), "--to", "npz",
            "--out", str(tmp_path / "missing" / "x.npz"), words=("does not exist",))
    refused("simulate", ExitCode.CANNOT_WRITE, "--connect", tcp_endpoint(), "--quiet",
            "--truth", str(tmp_path / "missing" / "truth.json"), words=("--truth",))
