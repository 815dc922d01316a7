"""A user netlist is untrusted: ``simloop run`` refuses every construct by which ngspice runs
commands or reads files outside the netlist's folder, before the engine ever sees the text.

Each refused netlist here is written so that it WOULD create a marker file if ngspice executed
it (a ``shell touch MARKER`` reached through the construct under test). After ``simloop run``
the marker must not exist. The positive controls run ``ngspice -b`` itself on the same layout in
a separate folder and see the marker appear, so the negative tests are meaningful: the
constructs really are dangerous in the installed ngspice. Constructs that ngspice 39 does not
execute on their own (``*#`` lines, a bare ``shell`` card, ``codemodel``/``osdi`` cards, ``.endc``
alone, a split ``.con``/``+trol``, which ngspice joins with a space) are refused as defence in
depth and have no positive control.
"""

from __future__ import annotations

import os
import shutil
import subprocess
from dataclasses import dataclass, field
from pathlib import Path

import pytest
from cli_support import run_simloop

#: The console script installed with simloop (``[project.scripts]`` in pyproject.toml).
NGSPICE = shutil.which("ngspice")

HEADER = "* user netlist\nVs in 0 SIN(0 1 50)\nR1 in out 1k\nR2 out 0 1k\n"  # lines 1-4
NETLIST = "that.cir"


def simloop(*args: str, cwd: Path, timeout: float = 60.0):
    """Run the real console script; output captured as text."""
    return run_simloop(*args, cwd=cwd, timeout=timeout)

@dataclass(frozen=True, slots=True)
class Case:
    """One refused construct.

    ``body`` follows HEADER (so its first line is line 5) unless ``whole`` is set; ``{marker}``
    is replaced by the absolute marker path, ``{outside}`` by the folder above the netlist's.
    ``extra`` files are written too: inside the netlist's folder (relative names) or, with a
    leading ``../``, outside it. ``link`` makes ``name -> target`` symlinks in the folder.
    """

    id: str
    body: str
    named: str  # lower-case text the error line must contain
    where: str  # "origin, line N" the error line must contain
    dangerous: bool = False  # ngspice -b on the same files creates the marker
    whole: bool = False
    extra: dict[str, str] = field(default_factory=dict)
    link: dict[str, str] = field(default_factory=dict)


CONTROL_FILE = "* outside the netlist's folder\n.control\nshell touch {marker}\n.endc\n"
CONTROL_LIB = ("* outside the netlist's folder\n.lib sec\n.control\nshell touch {marker}\n.endc\n"
               ".endl\n")
AT5 = f"netlist {NETLIST}, line 5"

CASES = [
    Case("control", ".control\nshell touch {marker}\n.endc\n", ".control", AT5, dangerous=True),
    Case("control-upper", ".CONTROL\nshell touch {marker}\n.ENDC\n", ".control", AT5,
         dangerous=True),
    Case("control-mixed-case", ".Control\nshell touch {marker}\n.Endc\n", ".control", AT5,
         dangerous=True),
    # ngspice matches .control as a prefix after leading blanks: ".controlx" opens a block too
    Case("control-indented-suffix", "   .controlx\nshell touch {marker}\n.endc\n", ".control", AT5,
         dangerous=True),
    Case("endc-alone", ".endc\n", ".endc", AT5),
    Case("backquote", ".param x = {`touch {marker}`}\n", "`", AT5),
    Case("shell-card", "shell touch {marker}\n", "shell", AT5),
    Case("codemodel", "codemodel {outside}/x.so\n", "codemodel", AT5),
    Case("osdi", "osdi {outside}/x.osdi\n", "osdi", AT5),
    Case("pre-osdi", "pre_osdi {outside}/x.osdi\n", "osdi", AT5),
    Case("include-absolute", ".include {outside}/outside.inc\n", "outside", AT5, dangerous=True,
         extra={"../outside.inc": CONTROL_FILE}),
    Case("include-dotdot", ".include ../outside.inc\n", "outside", AT5, dangerous=True,
         extra={"../outside.inc": CONTROL_FILE}),
    Case("inc-abbreviated", ".inc ../outside.inc\n", "outside", AT5, dangerous=True,
         extra={"../outside.inc": CONTROL_FILE}),
    Case("include-quoted", '.include "../outside.inc"\n', "outside", AT5, dangerous=True,
         extra={"../outside.inc": CONTROL_FILE}),
    Case("include-symlink-out", ".include link.inc\n", "outside", AT5, dangerous=True,
         extra={"../outside.inc": CONTROL_FILE}, link={"link.inc": "../outside.inc"}),
    Case("include-nested-out", ".include inner.inc\n", "outside", "include inner.inc, line 2",
         dangerous=True, extra={"inner.inc": "* inner\n.include ../outside.inc\n",
                                "../outside.inc": CONTROL_FILE}),
    Case("include-inside-with-control", ".include inner.inc\n", ".control",
         "include inner.inc, line 3", dangerous=True,
         extra={"inner.inc": "* inner, in the netlist's folder\nR5 out 0 1k\n.control\n"
                             "shell touch {marker}\n.endc\n"}),
    Case("lib-absolute", ".lib {outside}/outside.lib sec\n", "outside", AT5, dangerous=True,
         extra={"../outside.lib": CONTROL_LIB}),
    Case("lib-dotdot", ".lib ../outside.lib sec\n", "outside", AT5, dangerous=True,
         extra={"../outside.lib": CONTROL_LIB}),
    Case("LIB-upper", ".LIB ../outside.lib sec\n", "outside", AT5, dangerous=True,
         extra={"../outside.lib": CONTROL_LIB}),
    # screen() joins "+" continuations both with and without a space; ngspice joins with a space
    Case("continuation-control", ".con\n+trol\n", ".control", AT5),
    Case("continuation-shell", "R3 out 0 1k sh\n+ell\n", "shell", AT5),
    Case("hash-comment", "*# shell touch {marker}\n", "*#", AT5),
    Case("hash-comment-indented", "  *#shell touch {marker}\n", "*#", AT5),
    Case("ng-script-first-line", "*ng_script\nshell touch {marker}\n", "ng_script",
         f"netlist {NETLIST}, line 1", dangerous=True, whole=True),
    Case("ng-script-in-card", "R9 ng_script 0 1k\n", "ng_script", AT5),
    Case("carriage-return", "R3 out 0 1k\r.control\rshell touch {marker}\r.endc\n",
         "control character", AT5),
    Case("nul-byte", "R3 out 0 1k\x00\n", "nul", AT5),
    Case("csparam", ".csparam x=1\n", ".csparam", AT5),
]


def lay_out(case: Case, root: Path) -> tuple[Path, Path]:
    """Write the case's files under ``root``; returns (netlist folder, marker path)."""
    folder = root / "work"
    folder.mkdir()
    marker = folder / "MARKER"

    def fill(text: str) -> str:
        return text.replace("{marker}", str(marker)).replace("{outside}", str(root))

    text = fill(case.body) if case.whole else HEADER + fill(case.body) + ".tran 1m 20m\n.end\n"
    (folder / NETLIST).write_bytes(text.encode("utf-8"))
    for name, content in case.extra.items():
        (folder / name).write_text(fill(content), encoding="utf-8")
    for name, target in case.link.items():
        (folder / name).symlink_to(target)
    return folder, marker


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_run_refuses_construct_before_engine(case: Case, tmp_path: Path) -> None:
    folder, marker = lay_out(case, tmp_path)
    proc = simloop("run", NETLIST, "--probe", "v(out)", "--fundamental", "50", "--amplitude", "1",
                   "--harmonics", "2", "--json", "r.json", cwd=folder)
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stdout + proc.stderr
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].strip(), proc.stderr
    assert case.named in lines[0].lower(), lines[0]
    assert case.where in lines[0], lines[0]
    assert proc.stdout == ""
    assert not marker.exists()
    assert not (folder / "r.json").exists()


@pytest.mark.engine
@pytest.mark.parametrize("case", [c for c in CASES if c.dangerous],
                         ids=[c.id for c in CASES if c.dangerous])
def test_ngspice_runs_construct_positive_control(case: Case, tmp_path: Path) -> None:
    """ngspice itself, given the same files, does create the marker (so refusing them matters)."""
    if NGSPICE is None:
        pytest.fail("the ngspice program is missing: sudo apt-get install -y ngspice", pytrace=False)
    folder, marker = lay_out(case, tmp_path)
    home = tmp_path / "home"  # no user .spiceinit
    home.mkdir()
    subprocess.run([NGSPICE, "-b", NETLIST], cwd=folder, env=dict(os.environ, HOME=str(home)),
                   capture_output=True, timeout=60, check=False)
    assert marker.exists()


# ------------------------------------------------------------------------------- other channels
COMMANDS = ".control\nshell touch {marker}\n.endc"


@pytest.mark.parametrize("value", ["rload=1k\n.control", "rload=1k\n" + COMMANDS,
                                   "rload=`touch {marker}`", "rload=1k $ .control"],
                         ids=["newline-control", "newline-shell", "backquote", "inline-comment"])
def test_run_set_value_carrying_construct_refused(value: str, tmp_path: Path) -> None:
    marker = tmp_path / "MARKER"
    proc = simloop("run", "half-wave", "--harmonics", "2", "--set",
                   value.replace("{marker}", str(marker)), cwd=tmp_path)
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stdout + proc.stderr
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and "--set" in lines[0], proc.stderr
    assert not marker.exists()


def test_run_set_on_user_netlist_param_refused(tmp_path: Path) -> None:
    """A user netlist's own .param is settable, but not with text that carries commands."""
    marker = tmp_path / "MARKER"
    (tmp_path / NETLIST).write_text(
        "* user divider\n.param rl=1k\nVs in 0 SIN(0 1 50)\nR1 in out 1k\nR2 out 0 {rl}\n.end\n",
        encoding="utf-8")
    proc = simloop("run", NETLIST, "--probe", "v(out)", "--set",
                   "rl=1k\n" + COMMANDS.replace("{marker}", str(marker)), cwd=tmp_path)
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and "--set" in lines[0], proc.stderr
    assert not marker.exists()


@pytest.mark.parametrize("probe", ["v(out)\n" + COMMANDS, "v(out) .control", "v(out`touch {marker}`)",
                                   "v(out);shell touch {marker}"],
                         ids=["newline-control", "space-control", "backquote", "semicolon-shell"])
def test_run_probe_carrying_construct_refused(probe: str, tmp_path: Path) -> None:
    marker = tmp_path / "MARKER"
    proc = simloop("run", "half-wave", "--harmonics", "2", "--probe",
                   probe.replace("{marker}", str(marker)), cwd=tmp_path)
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stdout + proc.stderr
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and "probe" in lines[0], proc.stderr
    assert not marker.exists()
