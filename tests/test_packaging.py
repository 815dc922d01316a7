"""The set-up plumbing: bootstrap.sh, the Dockerfile and .ci/run install and run the same things.

No Docker engine runs here, so the Dockerfile is parsed, not built. bootstrap.sh is run for real in
a scratch copy, with stand-ins for ``id``, ``dpkg-query`` and ``apt-get`` first on PATH, so that
its root and non-root branches run without touching the machine; each such run stops before the
virtual environment is made.
"""

from __future__ import annotations

import json
import os
import posixpath
import re
import shlex
import shutil
import stat
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

PACKAGE_LIST = "packaging/debian-packages.txt"
TEST_PACKAGE_LIST = "packaging/debian-test-packages.txt"  # bootstrap.sh test mode only
BASH = shutil.which("bash") or "/bin/bash"
SHELL_OPERATORS = {"&&", "||", "|", ";", ";;", "&", "(", ")", "()"}


# ---- helpers ------------------------------------------------------------------------------------
def _pyproject(repo_root: Path) -> dict:
    with open(repo_root / "pyproject.toml", "rb") as handle:
        return tomllib.load(handle)


def _package_list(path: Path) -> list[str]:
    """Package names in a packages file: one or more per line, '#' starts a comment."""
    names: list[str] = []
    for line in path.read_text(encoding="utf-8").splitlines():
        names += line.split("#", 1)[0].split()
    return names


def _dockerfile(repo_root: Path) -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) pairs, continuation lines joined, comment lines dropped."""
    instructions: list[tuple[str, str]] = []
    pending = ""
    for line in (repo_root / "Dockerfile").read_text(encoding="utf-8").splitlines():
        if line.strip().startswith("#"):
            continue
        if line.rstrip().endswith("\\"):
            pending += line.rstrip()[:-1] + " "
            continue
        pending += line
        if pending.strip():
            keyword, _, arguments = pending.strip().partition(" ")
            instructions.append((keyword.upper(), arguments.strip()))
        pending = ""
    return instructions


def _simple_commands(shell_text: str) -> list[list[str]]:
    """Shell text split into simple commands (words), at &&, ||, |, ; and newlines."""
    commands: list[list[str]] = []
    for line in shell_text.splitlines():
        lexer = shlex.shlex(line, posix=True, punctuation_chars=True)
        lexer.commenters = "#"
        lexer.whitespace_split = True
        current: list[str] = []
        for token in lexer:
            if token in SHELL_OPERATORS:
                commands.append(current)
                current = []
            else:
                current.append(token)
        commands.append(current)
    return [command for command in commands if command]


def _install_arguments(command: list[str], installers: set[str]) -> list[str] | None:
    """Package words of an ``apt-get install`` (or installer function) call, else None."""
    words = list(command)
    while words and re.fullmatch(r"[A-Za-z_]\w*=.*", words[0]):
        words.pop(0)  # VAR=value prefixes
    if words[:1] == ["xargs"]:  # xargs [-r] [-a FILE] COMMAND...
        words.pop(0)
        while words and words[0].startswith("-"):
            del words[: 2 if words[0] == "-a" else 1]
    if not words or words[0] not in installers:
        return None
    if words[0] in {"apt-get", "apt"}:
        if "install" not in words:
            return None
        words = words[words.index("install") + 1 :]
    else:
        words = words[1:]
    return [word for word in words if not word.startswith("-")]


def _dockerfile_env(repo_root: Path) -> dict[str, str]:
    env: dict[str, str] = {}
    for keyword, args in _dockerfile(repo_root):
        if keyword == "ENV":
            env.update(word.split("=", 1) for word in shlex.split(args) if "=" in word)
    return env


def _is_pip_install(command: list[str]) -> bool:
    return command[:2] in (["pip", "install"], ["pip3", "install"]) or command[1:4] == [
        "-m",
        "pip",
        "install",
    ]


def _stub(directory: Path, name: str, body: str) -> None:
    path = directory / name
    path.write_text("#!/bin/sh\n" + body, encoding="utf-8")
    path.chmod(path.stat().st_mode | stat.S_IXUSR | stat.S_IXGRP | stat.S_IXOTH)


@pytest.fixture()
def scratch(tmp_path: Path, repo_root: Path) -> Path:
    """A copy of bootstrap.sh and the packages list, away from the real repository and its .venv."""
    copy = tmp_path / "repo"
    (copy / "packaging").mkdir(parents=True)
    shutil.copy2(repo_root / "bootstrap.sh", copy / "bootstrap.sh")
    shutil.copy2(repo_root / PACKAGE_LIST, copy / PACKAGE_LIST)
    shutil.copy2(repo_root / TEST_PACKAGE_LIST, copy / TEST_PACKAGE_LIST)
    return copy


def _stub_machine(tmp_path: Path, *, uid: int, installed: bool) -> tuple[Path, dict[str, str]]:
    """Stand-ins for id, dpkg-query and apt-get (which logs and installs nothing); returns (log, env)."""
    stubs = tmp_path / "stubs"
    stubs.mkdir()
    log = tmp_path / "apt.log"
    real_id = shutil.which("id") or "/usr/bin/id"
    _stub(stubs, "id", f'if [ "$1" = -u ]; then echo {uid}; else exec {real_id} "$@"; fi\n')
    status = "install ok installed" if installed else ""
    _stub(stubs, "dpkg-query", f"printf '%s' '{status}'\n" + ("exit 0\n" if installed else "exit 1\n"))
    _stub(stubs, "apt-get", f'echo "DEBIAN_FRONTEND=${{DEBIAN_FRONTEND:-}} $*" >> "{log}"\n')
    env = dict(os.environ, PATH=f"{stubs}{os.pathsep}{os.environ.get('PATH', '')}")
    env.pop("PYTHON", None)
    return log, env


def _run_bootstrap(
    script: Path, *args: str, env: dict[str, str] | None = None, cwd: Path | None = None
) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [BASH, str(script), *args],
        cwd=cwd or script.parent,
        env=env if env is not None else dict(os.environ),
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=60,
    )


def _log_lines(log: Path) -> list[str]:
    return log.read_text(encoding="utf-8").splitlines() if log.exists() else []


# ---- one system package list ----------------------------------------------------------------
def test_package_list_names_the_engine(repo_root: Path) -> None:
    packages = _package_list(repo_root / PACKAGE_LIST)
    # common practice: Debian ships the ngspice program in "ngspice" and its shared library in
    # "libngspice0" (the library PySpice loads).
    assert {"ngspice", "libngspice0"} <= set(packages)
    assert len(packages) == len(set(packages)), f"duplicate names in {PACKAGE_LIST}: {packages}"


def test_dockerfile_installs_the_package_list_only(repo_root: Path) -> None:
    instructions = _dockerfile(repo_root)
    copies = [shlex.split(args) for keyword, args in instructions if keyword == "COPY"]
    list_copies = [words for words in copies if words[0] == PACKAGE_LIST]
    assert len(list_copies) == 1, f"the Dockerfile must COPY {PACKAGE_LIST} in once"
    destination = list_copies[0][-1]

    runs = [args for keyword, args in instructions if keyword == "RUN"]
    installs = []
    for run in runs:
        for command in _simple_commands(run):
            packages = _install_arguments(command, {"apt-get", "apt"})
            if packages is not None:
                installs.append((run, command, packages))
    assert len(installs) == 1, f"expected one apt-get install in the Dockerfile, got {installs}"
    run, command, packages = installs[0]
    assert packages == [], f"Dockerfile hard-codes apt packages {packages}: list them in {PACKAGE_LIST}"
    assert "xargs" in command, "the package names must come from the list, through xargs"
    assert destination in run, f"the apt-get install must read {destination}"
    assert "--no-install-recommends" in command and "-y" in command
    assert "apt-get update" in run and "rm -rf /var/lib/apt/lists/" in run


def test_bootstrap_hard_codes_no_apt_package(repo_root: Path) -> None:
    text = (repo_root / "bootstrap.sh").read_text(encoding="utf-8")
    assert PACKAGE_LIST in text
    calls = [
        packages
        for command in _simple_commands(text)
        if (packages := _install_arguments(command, {"apt-get", "apt", "apt_install"})) is not None
    ]
    assert calls, "bootstrap.sh installs nothing with apt-get"
    for packages in calls:
        for word in packages:
            # Variables only; the one literal allowed is Debian's pythonX.Y-venv.
            assert word.startswith("$") or re.fullmatch(r"python[\w.${}]*-venv", word), (
                f"bootstrap.sh hard-codes apt package {word!r}: list it in {PACKAGE_LIST}"
            )


def test_bootstrap_nonroot_prints_install_command(scratch: Path, tmp_path: Path) -> None:
    # An extra name in the scratch list proves the names come from the file, not the script.
    list_path = scratch / PACKAGE_LIST
    list_path.write_text(list_path.read_text() + "pkg-from-list  # comment\n", encoding="utf-8")
    log, env = _stub_machine(tmp_path, uid=1000, installed=False)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    result = _run_bootstrap(scratch / "bootstrap.sh", "test", env=env, cwd=elsewhere)
    expected = "sudo apt-get install -y " + " ".join(
        _package_list(list_path) + _package_list(scratch / TEST_PACKAGE_LIST))
    assert result.returncode == 1, result.stderr
    assert expected in result.stderr.splitlines()[-1]
    assert _log_lines(log) == []
    assert not (scratch / ".venv").exists()


def test_bootstrap_root_installs_missing_packages(scratch: Path, tmp_path: Path) -> None:
    log, env = _stub_machine(tmp_path, uid=0, installed=False)
    result = _run_bootstrap(scratch / "bootstrap.sh", "test", env=env)
    packages = " ".join(_package_list(scratch / PACKAGE_LIST)
                        + _package_list(scratch / TEST_PACKAGE_LIST))
    assert _log_lines(log) == [
        "DEBIAN_FRONTEND=noninteractive update",
        f"DEBIAN_FRONTEND=noninteractive install -y --no-install-recommends {packages}",
    ]
    # The stand-in apt-get installs nothing, so the re-check must stop the script.
    assert result.returncode == 1
    assert "still not installed" in result.stderr
    assert not (scratch / ".venv").exists()


# ---- Debian's venv package -----------------------------------------------------------------
@pytest.fixture()
def python_without_ensurepip(tmp_path: Path) -> Path:
    """This interpreter with ensurepip shadowed, as Debian's python3 is without python3.X-venv."""
    shadow = tmp_path / "shadow"
    shadow.mkdir()
    (shadow / "ensurepip.py").write_text('raise ImportError("no ensurepip (stand-in)")\n')
    wrapper = tmp_path / "python-without-ensurepip"
    wrapper.write_text(f'#!/bin/sh\nPYTHONPATH="{shadow}" exec "{sys.executable}" "$@"\n')
    wrapper.chmod(0o755)
    return wrapper


def test_bootstrap_nonroot_asks_for_venv_package(
    scratch: Path, tmp_path: Path, python_without_ensurepip: Path
) -> None:
    log, env = _stub_machine(tmp_path, uid=1000, installed=True)
    env["PYTHON"] = str(python_without_ensurepip)
    result = _run_bootstrap(scratch / "bootstrap.sh", "test", env=env)
    venv_package = "python%d.%d-venv" % sys.version_info[:2]
    assert result.returncode == 1, result.stderr
    assert f"sudo apt-get install -y {venv_package}" in result.stderr
    assert _log_lines(log) == []
    assert not (scratch / ".venv").exists()


def test_bootstrap_root_installs_venv_package(
    scratch: Path, tmp_path: Path, python_without_ensurepip: Path
) -> None:
    log, env = _stub_machine(tmp_path, uid=0, installed=True)
    env["PYTHON"] = str(python_without_ensurepip)
    result = _run_bootstrap(scratch / "bootstrap.sh", "test", env=env)
    venv_package = "python%d.%d-venv" % sys.version_info[:2]
    assert _log_lines(log) == [
        "DEBIAN_FRONTEND=noninteractive update",
        f"DEBIAN_FRONTEND=noninteractive install -y --no-install-recommends {venv_package}",
    ]
    assert result.returncode == 1  # the stand-in installed nothing: clear error, no .venv
    assert "cannot create virtual environments" in result.stderr
    assert not (scratch / ".venv").exists()


# ---- Python version, usage ------------------------------------------------------------------
def test_bootstrap_rejects_old_python(scratch: Path, tmp_path: Path, repo_root: Path) -> None:
    minimum = re.fullmatch(r">=\s*3\.(\d+)", _pyproject(repo_root)["project"]["requires-python"])
    assert minimum is not None
    old = tmp_path / "old-python"
    old.write_text(f"#!/bin/sh\necho 3.{int(minimum[1]) - 1}\n")
    old.chmod(0o755)
    result = _run_bootstrap(scratch / "bootstrap.sh", "test", env=dict(os.environ, PYTHON=str(old)))
    assert result.returncode == 1
    assert f"Python 3.{minimum[1]} or newer needed" in result.stderr


def test_bootstrap_missing_python(scratch: Path, tmp_path: Path) -> None:
    env = dict(os.environ, PYTHON=str(tmp_path / "no-such-python"))
    result = _run_bootstrap(scratch / "bootstrap.sh", "demo", env=env)
    assert result.returncode == 1
    assert "not found" in result.stderr and "PYTHON=" in result.stderr


@pytest.mark.parametrize("args", [(), ("frobnicate",), ("--help",)])
def test_bootstrap_usage_exit_2(scratch: Path, args: tuple[str, ...]) -> None:
    result = _run_bootstrap(scratch / "bootstrap.sh", *args)
    assert result.returncode == 2
    assert result.stderr.startswith("usage: bash bootstrap.sh {demo|test}")
    assert not (scratch / ".venv").exists()


@pytest.mark.parametrize("script", ["bootstrap.sh", ".ci/run"])
def test_bash_syntax(repo_root: Path, script: str) -> None:
    result = subprocess.run([BASH, "-n", str(repo_root / script)], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    assert "set -euo pipefail" in (repo_root / script).read_text(encoding="utf-8")


# ---- one Python package, one entry point, one engine setting ---------------------------------
def test_dockerfile_base_image_debian_pinned(repo_root: Path) -> None:
    images = [args.split()[0] for keyword, args in _dockerfile(repo_root) if keyword == "FROM"]
    assert len(images) == 1, images
    match = re.fullmatch(
        r"(?:docker\.io/library/)?python:(\d+)\.(\d+)(?:\.\d+)?-(?:slim-)?"
        r"(bookworm|bullseye|trixie)(?:@sha256:[0-9a-f]{64})?",
        images[0],
    )
    assert match, f"base image {images[0]!r} is not a pinned Debian-based python image"
    minimum = re.fullmatch(r">=\s*(\d+)\.(\d+)", _pyproject(repo_root)["project"]["requires-python"])
    assert minimum is not None
    assert (int(match[1]), int(match[2])) >= (int(minimum[1]), int(minimum[2]))


def test_dockerfile_installs_project_package(repo_root: Path) -> None:
    extras_known = set(_pyproject(repo_root)["project"]["optional-dependencies"])
    workdir, source_dir, final_user = "/", None, "root"
    arg_defaults: dict[str, str] = {}
    targets: list[tuple[str, str]] = []
    for keyword, args in _dockerfile(repo_root):
        if keyword == "ARG":
            name, _, default = args.partition("=")
            arg_defaults[name] = default
        elif keyword == "WORKDIR":
            workdir = posixpath.join(workdir, args)
        elif keyword == "USER":
            final_user = args.split(":")[0]
        elif keyword == "COPY" and shlex.split(args)[0] == ".":
            source_dir = posixpath.normpath(posixpath.join(workdir, shlex.split(args)[-1]))
        elif keyword == "RUN":
            for command in _simple_commands(args):
                if _is_pip_install(command):
                    assert "-e" not in command and "--editable" not in command
                    words = [w for w in command[command.index("install") + 1 :] if not w.startswith("-")]
                    targets += [(word, workdir) for word in words]
    assert source_dir is not None, "the Dockerfile must COPY the project root (COPY . DEST)"
    assert len(targets) == 1, f"expected one pip install of the project, got {targets}"
    word, pip_dir = targets[0]
    assert posixpath.normpath(pip_dir) == source_dir, "pip must run in the copied project root"
    # Expand the word as the RUN shell would, with each build-argument value worth trying.
    for extras in {arg_defaults.get("EXTRAS", ""), ""}:
        expanded = subprocess.run(
            ["sh", "-c", f'printf %s "{word}"'],
            env=dict(os.environ, EXTRAS=extras),
            capture_output=True,
            text=True,
            check=True,
        ).stdout
        match = re.fullmatch(r"\.(?:\[([\w,-]+)\])?", expanded)
        assert match, f"pip installs {expanded!r} with EXTRAS={extras!r}, not the project root"
        assert set(filter(None, (match[1] or "").split(","))) <= extras_known
    assert final_user not in {"root", "0"}, "the image must run as a non-root user"
    assert posixpath.normpath(workdir) != source_dir, "the working directory must be empty"


def test_dockerfile_entrypoint_is_console_script(repo_root: Path) -> None:
    instructions = dict(_dockerfile(repo_root))
    entrypoint = json.loads(instructions["ENTRYPOINT"])
    scripts = _pyproject(repo_root)["project"]["scripts"]
    assert entrypoint == ["simloop"] and "simloop" in scripts
    assert json.loads(instructions["CMD"]) == ["--help"]


def test_ngspice_library_path_same_everywhere(repo_root: Path) -> None:
    env_values = _dockerfile_env(repo_root)
    bootstrap = (repo_root / "bootstrap.sh").read_text(encoding="utf-8")
    in_bootstrap = re.findall(r'NGSPICE_LIBRARY_PATH="\$\{NGSPICE_LIBRARY_PATH:-([^}]+)\}"', bootstrap)
    conftest = (repo_root / "tests" / "conftest.py").read_text(encoding="utf-8")
    in_conftest = re.findall(r'NGSPICE_LIBRARY_DEFAULT = "([^"]+)"', conftest)
    assert in_bootstrap == in_conftest == [env_values["NGSPICE_LIBRARY_PATH"]]


def test_ngspice_library_path_shipped_by_libngspice0(repo_root: Path) -> None:
    if shutil.which("dpkg-query") is None:
        pytest.skip("not a Debian system: dpkg-query missing")
    listing = subprocess.run(["dpkg-query", "-L", "libngspice0"], capture_output=True, text=True)
    if listing.returncode != 0:
        pytest.skip("Debian package libngspice0 is not installed (bash bootstrap.sh installs it)")
    soname = _dockerfile_env(repo_root)["NGSPICE_LIBRARY_PATH"]
    assert any(Path(line).name == soname for line in listing.stdout.splitlines())


def test_dockerignore_excludes_local_state(repo_root: Path) -> None:
    patterns = {
        line.strip().strip("/")
        for line in (repo_root / ".dockerignore").read_text(encoding="utf-8").splitlines()
        if line.strip() and not line.startswith("#")
    }
    assert {".venv", ".git", "demo-output"} <= patterns


# ---- CI runs exactly the README's test command ------------------------------------------------
def test_ci_run_is_bootstrap_test(repo_root: Path) -> None:
    commands = [
        line.strip()
        for line in (repo_root / ".ci" / "run").read_text(encoding="utf-8").splitlines()
        if line.strip() and not line.strip().startswith("#")
    ]
    assert commands.index("set -euo pipefail") < commands.index("bash bootstrap.sh test")
    assert not any(re.search(r"\|\|\s*(true|:)", line) for line in commands)


@pytest.mark.parametrize("status", [0, 3])
def test_ci_run_calls_bootstrap_from_repo_root(repo_root: Path, tmp_path: Path, status: int) -> None:
    fake_repo = tmp_path / "repo"
    (fake_repo / ".ci").mkdir(parents=True)
    shutil.copy2(repo_root / ".ci" / "run", fake_repo / ".ci" / "run")
    (fake_repo / "bootstrap.sh").write_text(f'printf "%s|%s\\n" "$PWD" "$*"\nexit {status}\n')
    result = subprocess.run(
        [BASH, str(fake_repo / ".ci" / "run")],
        cwd=tmp_path,
        stdin=subprocess.DEVNULL,
        capture_output=True,
        text=True,
        timeout=30,
    )
    assert result.returncode == status
    assert result.stdout.splitlines() == [f"{fake_repo.resolve()}|test"]


def test_bootstrap_demo_mode_installs_no_test_packages(scratch: Path, tmp_path: Path) -> None:
    # The browser for the report tests is a test-only need: `demo` installs the runtime list only.
    log, env = _stub_machine(tmp_path, uid=0, installed=False)
    _run_bootstrap(scratch / "bootstrap.sh", "demo", env=env)
    runtime = " ".join(_package_list(scratch / PACKAGE_LIST))
    assert _log_lines(log)[-1] == f"DEBIAN_FRONTEND=noninteractive install -y --no-install-recommends {runtime}"


def test_dockerfile_leaves_the_test_packages_out(repo_root: Path) -> None:
    dockerfile = (repo_root / "Dockerfile").read_text(encoding="utf-8")
    assert TEST_PACKAGE_LIST not in dockerfile
    for name in _package_list(repo_root / TEST_PACKAGE_LIST):
        assert name not in dockerfile.split(), name
