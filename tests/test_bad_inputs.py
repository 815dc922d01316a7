"""The bad-input catalogue: every kind of wrong input gets one line, exit 2, no traceback.

Through the real console script (``simloop ideal | run | sweep | check``) each case must give
exit code 2, exactly one line on stderr that names what was wrong and how to fix it (the
``must`` fragments of each case: first what, then how), nothing on stdout and no output file.
Through the Python API each case must raise the documented exception (``InputError``, or its
subclass ``NetlistRefused`` for refused netlist text; both are ``SimloopError``) with a
one-line message.

This extends tests/test_cli_refusals.py (constructs that run commands), tests/test_cli_run.py
and tests/test_cli_ideal.py (their BAD_* lists): no case of those is repeated here.

The command-line cases need no engine: all are refused before a simulation starts. They run in
this process through ``simloop.cli.main`` (what the console script calls), and a sample of them
through the installed console script as well.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from simloop.analyse import RunSettings, run_circuit
from simloop.engine import EnginePool, TransientRequest
from simloop.errors import InputError, NetlistRefused, SimloopError
from simloop.fourier import spectrum_from_samples
from simloop.ideal import ideal_spectrum
from simloop.netlist import find_periodic_source, load_circuit, parse_assignment
from simloop.probe import parse_probe
from simloop.steady import SteadySettings
from simloop.sweep import Vary, expand_grid, parse_vary
from simloop.units import parse_number

SIMLOOP = Path(sys.executable).parent / "simloop"

# ---------------------------------------------------------------------------------- files
SIN = "Vs in 0 SIN(0 1 50)\nR1 in out 1k\nR2 out 0 1k\n"


def _divider(title: str, extra: str = "") -> bytes:
    return (f"* {title}\n{SIN}{extra}.end\n").encode()


def _driven(title: str, source: str, *, params: str = "", r1: str = "1k", r2: str = "1k") -> bytes:
    """A divider driven by ``Vs in 0 <source>``, with optional ``.param`` text before it."""
    head = f".param {params}\n" if params else ""
    return f"* {title}\n{head}Vs in 0 {source}\nR1 in out {r1}\nR2 out 0 {r2}\n.end\n".encode()


def _deep_toml(prefix: str) -> bytes:
    return (prefix + "x = " + "[" * 5000 + "]" * 5000 + "\n").encode()


#: File name -> contents; each case lists the files it needs in its own folder.
FILES: dict[str, Callable[[], bytes]] = {
    "empty.cir": lambda: b"",
    "title.cir": lambda: b"* only a title line\n",
    "pwl.cir": lambda: b"* PWL drive, not periodic\nV1 in 0 PWL(0 0 1m 1)\nR1 in out 1k\nR2 out 0 1k\n.end\n",
    "binary.cir": lambda: bytes(range(256)) * 16,
    # the 8-byte PNG signature (PNG specification, sec. 5.2; common practice) and an IHDR chunk
    "image.cir": lambda: b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR" + bytes(64),
    "huge.cir": lambda: b"* 3 MB of resistors\n" + b"R1 a 0 1k\n" * 300_000,
    "latin.cir": lambda: "* r\u00e9sistance in Latin-1\n".encode("latin-1") + SIN.encode(),
    "utf16.cir": lambda: ("* UTF-16 text\n" + SIN).encode("utf-16"),
    "missinc.cir": lambda: _divider("missing include", ".include nothere.lib\n"),
    "circ.cir": lambda: _divider("circular include", ".include a.lib\n"),
    "a.lib": lambda: b"* a\n.include b.lib\n",
    "b.lib": lambda: b"* b\n.include a.lib\n",
    "selfinc.cir": lambda: _divider("includes itself", ".include selfinc.cir\n"),
    "incdir.cir": lambda: _divider("includes a folder", ".include sub\n"),
    "undef.cir": lambda: _driven("undefined resistance", "SIN(0 1 50)", r1="{rser}"),
    "undeff.cir": lambda: _driven("undefined frequency", "SIN(0 {vp} {f0})", params="vp=1"),
    "sin0.cir": lambda: _driven("0 Hz", "SIN(0 1 0)"),
    "sinneg.cir": lambda: _driven("-50 Hz", "SIN(0 1 -50)"),
    "damped.cir": lambda: _driven("damped", "SIN(0 1 50 0 10)"),
    "pcount.cir": lambda: _driven("five pulses", "PULSE(0 1 0 1u 1u 10u 20u 5)"),
    "plong.cir": lambda: _driven("pulse longer than its period", "PULSE(0 1 0 1u 1u 30u 20u)"),
    "ptr0.cir": lambda: _driven("zero edges", "PULSE(0 1 0 0 0 10u 20u)"),
    "plus.cir": lambda: b"* leading continuation\n+ R1 in out 1k\nVs in 0 SIN(0 1 50)\nR2 out 0 1k\n.end\n",
    "nanfreq.cir": lambda: _driven("nan frequency", "SIN(0 1 nan)"),
    "divzero.cir": lambda: _driven("1/0", "SIN(0 1 {f0})", params="f0={1/0}"),
    "tower.cir": lambda: _driven("power tower", "SIN(0 1 {2**2**2**2**2})"),
    "hugefreq.cir": lambda: _driven("1e308 Hz", "SIN(0 1 1e308)"),
    "longinc.cir": lambda: _divider("include name of 5000 characters", f".include {'y' * 5000}.lib\n"),
    "badtoml.cir": lambda: _divider("sidecar is not TOML"),
    "badtoml.toml": lambda: b"title = \n",
    "unkkey.cir": lambda: _divider("sidecar with a misspelt key"),
    "unkkey.toml": lambda: b"titel = 'x'\n",
    "minmax.cir": lambda: _driven("range upside down", "SIN(0 1 50)", params="rl=1k", r2="{rl}"),
    "minmax.toml": lambda: b"[parameters]\nrl = { unit = 'ohm', min = 10, max = 1 }\n",
    "deepside.cir": lambda: _divider("sidecar nested 5000 deep"),
    "deepside.toml": lambda: _deep_toml(""),
    # design files (simloop check)
    "notoml.toml": lambda: b"circuit = \n",
    "unkdesign.toml": lambda: b'circuit = "half-wave"\ncircut = 1\n',
    "nocirc.toml": lambda: b'title = "no circuit"\n',
    "badmetric.toml": lambda: b'circuit = "half-wave"\n[[limit]]\nmetric = "h2_foo"\nmax = 1\n',
    "minmaxd.toml": lambda: b'circuit = "half-wave"\n[[limit]]\nmetric = "dc_v"\nmin = 5\nmax = 1\n',
    "harm0.toml": lambda: b'circuit = "half-wave"\n[settings]\nharmonics = 0\n',
    "harmbig.toml": lambda: b'circuit = "half-wave"\n[settings]\nharmonics = 100000000000\n',
    "emptycorner.toml": lambda: b'circuit = "half-wave"\n[corners]\nrload = []\n',
    "refused.toml": lambda: b'circuit = "evil.cir"\n',
    "evil.cir": lambda: b"* evil\nVs in 0 SIN(0 1 50)\nR1 in out 1k\n.control\nshell id\n.endc\n",
    "nanbound.toml": lambda: b'circuit = "half-wave"\n[[limit]]\nmetric = "dc_v"\nmax = nan\n',
    "unitbound.toml": lambda: b'circuit = "half-wave"\n[[limit]]\nmetric = "dc_v"\nmax = "5V"\n',
    "tolnan.toml": lambda: b'circuit = "half-wave"\n[settings]\ntolerance = nan\n',
    "setinf.toml": lambda: b'circuit = "half-wave"\n[parameters]\nrload = inf\n',
    "negthd.toml": lambda: b'circuit = "half-wave"\n[[limit]]\nmetric = "thd"\nmax = -1\n',
    "h99.toml": lambda: b'circuit = "half-wave"\n[[limit]]\nmetric = "h99_v"\nmax = 5\n',
    "latind.toml": lambda: b'circuit = "half-wave"\ntitle = "r\xe9sistance"\n',
    "bind.toml": lambda: bytes(range(128, 256)) * 8,
    "deepd.toml": lambda: _deep_toml('circuit = "half-wave"\n'),
    "huged.toml": lambda: b'circuit = "half-wave"\n' + b"# padding\n" * 400_000,
    "designs/outside.toml": lambda: (b'circuit = "../elsewhere.cir"\n[settings]\nharmonics = 2\n'
                                     b'probe = "v(out)"\n[[limit]]\nmetric = "h1_v"\nmax = 1\n'),
    "elsewhere.cir": lambda: _divider("a netlist outside the design file's folder"),
}


@dataclass(frozen=True, slots=True)
class Bad:
    """One command line that must be refused.

    ``must``: fragments the error line must hold (what was wrong, then how to fix it).
    ``files``: names from FILES written into the case's folder (``sub/`` is made as a folder).
    """

    id: str
    argv: tuple[str, ...]
    must: tuple[str, ...] = ()
    files: tuple[str, ...] = ()
    bug: str | None = None  # the exact bug, for a strict xfail


def b(id: str, argv: str | tuple[str, ...], *must: str, files: tuple[str, ...] = (),
      bug: str | None = None) -> Bad:
    return Bad(id, tuple(argv.split()) if isinstance(argv, str) else argv, must, files, bug)


NOT_A_NUMBER = "write digits with an optional scale suffix"

CLI: list[Bad] = [
    # ----------------------------------------------------------------- ideal: duty, units, NaN
    b("ideal-duty-0", "ideal pulse --amplitude 1 --duty 0", "duty", "strictly between 0 and 1"),
    b("ideal-duty-1", "ideal pulse --amplitude 1 --duty 1", "duty", "strictly between 0 and 1"),
    b("ideal-duty-negative", "ideal pulse --amplitude 1 --duty -0.2", "duty", "strictly between 0 and 1"),
    b("ideal-duty-nan", "ideal pulse --amplitude 1 --duty nan", "--duty", "'nan'", NOT_A_NUMBER),
    b("ideal-amplitude-with-unit", "ideal half-wave --amplitude 10V", "--amplitude", "'10V'", "no units"),
    b("ideal-amplitude-inf", "ideal half-wave --amplitude inf", "--amplitude", "'inf'", NOT_A_NUMBER),
    b("ideal-harmonics-absurd", "ideal half-wave --amplitude 1 --harmonics 99999999999999999999",
      "--harmonics", "1..10000"),
    b("ideal-harmonics-fraction", "ideal half-wave --amplitude 1 --harmonics 1.5", "--harmonics",
      "whole number"),
    b("ideal-fundamental-overflow", "ideal half-wave --amplitude 1 --fundamental 1e999",
      "--fundamental", "finite"),
    b("ideal-trapezoid-edges-too-long", "ideal trapezoid --amplitude 1 --duty 0.5 --rise 1m --fundamental 1k",
      "rise + fall", "shorten the edges"),
    b("ideal-conduction-angle-0", "ideal truncated-cosine --amplitude 1 --conduction-angle 0",
      "--conduction-angle", "(0, 360]"),
    b("ideal-rise-negative", "ideal trapezoid --amplitude 1 --duty 0.5 --rise=-1n", "--rise", ">= 0"),
    b("ideal-delay-negative", "ideal square --amplitude 1 --delay=-1", "--delay", ">= 0"),
    # ----------------------------------------------------------------- run: engine options
    b("run-tmax-0", "run half-wave --tmax 0", "--tmax", "> 0"),
    b("run-timeout-0", "run half-wave --timeout 0", "--timeout", "> 0"),
    b("run-tolerance-0", "run half-wave --tolerance 0", "--tolerance", "> 0"),
    b("run-tolerance-2", "run half-wave --tolerance 2", "tolerance", "(0, 1)", "try 1e-7"),
    b("run-max-periods-text", "run half-wave --max-periods abc", "--max-periods", "'abc'"),
    b("run-harmonics-0", "run half-wave --harmonics 0", "--harmonics", "1..1000"),
    b("run-amplitude-0", "run half-wave --amplitude 0", "--amplitude", "> 0"),
    b("run-fundamental-nan", "run half-wave --fundamental nan", "--fundamental", "'nan'", NOT_A_NUMBER),
    b("run-ideal-unknown", "run half-wave --ideal sawtooth", "sawtooth", "choose from"),
    b("run-resample-unknown", "run half-wave --resample cubic", "cubic", "choose from"),
    # ----------------------------------------------------------------- run: --set values
    b("set-zero-load", "run half-wave --set rload=0", "--set rload = 0 ohm",
      "outside its range 1 .. 1e+06 ohm", "choose a value inside"),
    b("set-nan", "run half-wave --set vpk=nan", "--set vpk", "'nan'", NOT_A_NUMBER),
    b("set-inf", "run half-wave --set freq=inf", "--set freq", "'inf'", NOT_A_NUMBER),
    b("set-overflow", "run half-wave --set rload=1e999", "--set rload", "finite"),
    b("set-with-unit", "run half-wave --set rload=1kohm", "--set rload", "'1kohm'", "no units"),
    b("set-negative-capacitance", "run half-wave --set cres=-1u", "--set cres", "outside its range",
      "choose a value inside"),
    b("set-empty", ("run", "half-wave", "--set", "="), "NAME=VALUE", "rload=1k"),
    b("set-duty-above-1", "run switching-stage --set duty=1.2", "--set duty = 1.2", "0.02 .. 0.98"),
    b("set-duty-0", "run switching-stage --set duty=0", "--set duty = 0", "0.02 .. 0.98"),
    b("set-parameter-of-another-circuit", "run half-wave --set trise=1n", "'trise'", "known: vpk"),
    # ----------------------------------------------------------------- run: probes
    b("probe-current-of-resistor", "run half-wave --probe i(rload)", "i(rload)", "0 V source in series"),
    b("probe-ground", "run half-wave --probe v(0)", "ground", "name another node"),
    b("probe-node-against-itself", "run half-wave --probe v(out,out)", "against itself"),
    b("probe-unknown-name", "run half-wave --probe nosuchprobe", "'nosuchprobe'", "named probes are"),
    b("probe-unknown-source", "run half-wave --probe i(vnope)", "'vnope'", "sources are"),
    # ----------------------------------------------------------------- run: netlist files
    b("netlist-empty", "run empty.cir", "empty.cir", "no SIN or PULSE source", "sidecar .toml",
      files=("empty.cir",)),
    b("netlist-title-only", "run title.cir", "title.cir", "no SIN or PULSE source", files=("title.cir",)),
    b("netlist-pwl-drive", "run pwl.cir", "pwl.cir", "no SIN or PULSE source", files=("pwl.cir",)),
    b("netlist-binary", "run binary.cir", "binary.cir, line 1", "NUL byte", "plain text",
      files=("binary.cir",)),
    b("netlist-image", "run image.cir", "image.cir", "NUL byte", "plain text", files=("image.cir",)),
    b("netlist-huge", "run huge.cir", "huge.cir", "larger than the 2097152 bytes", "split",
      files=("huge.cir",)),
    b("netlist-latin1", "run latin.cir", "latin.cir, line 1", "not valid UTF-8", "save the file as UTF-8",
      files=("latin.cir",)),
    b("netlist-utf16", "run utf16.cir", "utf16.cir", "NUL byte", files=("utf16.cir",)),
    b("netlist-missing-include", "run missinc.cir", "nothere.lib", "check the path",
      files=("missinc.cir",)),
    b("netlist-circular-include", "run circ.cir", "circular include circ.cir -> a.lib -> b.lib -> a.lib",
      "remove one of the include cards", files=("circ.cir", "a.lib", "b.lib")),
    b("netlist-includes-itself", "run selfinc.cir", "circular include selfinc.cir -> selfinc.cir",
      "remove one", files=("selfinc.cir",)),
    b("netlist-includes-a-folder", "run incdir.cir", "is not a readable file", "check the path",
      files=("incdir.cir",)),
    b("netlist-undefined-parameter", "run undef.cir", "undef.cir, line 3", "'rser'", "never defined",
      "add .param rser=", files=("undef.cir",)),
    b("netlist-undefined-frequency", "run undeff.cir", "'f0'", "never defined", "add .param f0=",
      files=("undeff.cir",)),
    b("netlist-sin-0-hz", "run sin0.cir", "sin0.cir, line 2", "frequency 0.0", "must be > 0",
      files=("sin0.cir",)),
    b("netlist-sin-negative-hz", "run sinneg.cir", "frequency -50.0", "must be > 0", files=("sinneg.cir",)),
    b("netlist-sin-damped", "run damped.cir", "damped", "set THETA to 0", files=("damped.cir",)),
    b("netlist-pulse-count", "run pcount.cir", "pulse count", "remove the 8th value", files=("pcount.cir",)),
    b("netlist-pulse-longer-than-period", "run plong.cir", "longer than the period", "shorten the pulse",
      files=("plong.cir",)),
    b("netlist-pulse-zero-edges", "run ptr0.cir", "TR > 0", "got TD 0, TR 0", files=("ptr0.cir",)),
    b("netlist-leading-continuation", "run plus.cir", "plus.cir, line 2", "'+' continuation line",
      "remove the '+'", files=("plus.cir",)),
    b("netlist-nan-literal", "run nanfreq.cir", "'nan'", "use numbers", files=("nanfreq.cir",)),
    b("netlist-power-tower", "run tower.cir", "cannot evaluate", "use numbers", files=("tower.cir",)),
    b("netlist-division-by-zero", "run divzero.cir", "'f0'", "{1/0}", files=("divzero.cir",),
      bug="a .param whose expression fails ({1/0}) is reported as \"cannot evaluate '{f0}' ... "
          "(unknown 'f0'); use numbers or .param names\": f0 IS a .param; the message should name "
          "f0's expression {1/0} as the one that cannot be evaluated"),
    b("netlist-frequency-1e308", "run hugefreq.cir", files=("hugefreq.cir",)),
    b("netlist-folder", "run sub.cir", "'sub.cir'", "not a netlist file", files=("sub.cir/",)),
    b("netlist-device-file", "run /dev/zero", "'/dev/zero'", "not a netlist file"),
    b("netlist-name-too-long", ("run", "x" * 5000), "not a netlist file"),
    b("netlist-include-name-too-long", "run longinc.cir", "check the path", files=("longinc.cir",)),
    b("sidecar-not-toml", "run badtoml.cir", "badtoml.toml", "not valid TOML", "fix the file",
      files=("badtoml.cir", "badtoml.toml")),
    b("sidecar-unknown-key", "run unkkey.cir", "unknown keys titel", "known: ",
      files=("unkkey.cir", "unkkey.toml")),
    b("sidecar-min-above-max", "run minmax.cir", "min 10 is above max 1", "swap",
      files=("minmax.cir", "minmax.toml")),
    b("sidecar-nested-5000-deep", "run deepside.cir", "deepside.toml",
      files=("deepside.cir", "deepside.toml")),
    # ----------------------------------------------------------------- sweep specs
    b("vary-without-equals", "sweep half-wave --vary rload", "--vary 'rload'", "NAME=LIST"),
    b("vary-empty-spec", "sweep half-wave --vary rload=", "--vary 'rload='", "NAME=LIST"),
    b("vary-empty-model-list", "sweep half-wave --vary diode=", "--vary 'diode='", "NAME=LIST"),
    b("vary-count-0", "sweep half-wave --vary rload=1:10:0", "COUNT must be at least 1, got 0"),
    b("vary-count-negative", "sweep half-wave --vary rload=1:10:-3", "COUNT must be at least 1, got -3"),
    b("vary-count-text", "sweep half-wave --vary rload=1:10:abc", "COUNT must be a whole number"),
    b("vary-count-in-e-notation", "sweep half-wave --vary rload=1:10:1e3", "COUNT must be a whole number"),
    b("vary-log-through-negative", "sweep half-wave --vary rload=-1:10:3:log", "log range",
      "START and STOP > 0"),
    b("vary-repeated-value", "sweep half-wave --vary rload=1k,1k", "listed twice", "give each value once"),
    b("vary-unknown-name", "sweep half-wave --vary nosuch=1,2", "'nosuch'", "known: vpk"),
    b("vary-unknown-range-word", "sweep half-wave --vary rload=1:10:3:lin", "'1:10:3:lin'",
      "START:STOP:COUNT:log"),
    b("vary-too-many-fields", "sweep half-wave --vary rload=1:10:3:log:x", "'1:10:3:log:x'",
      "START:STOP:COUNT"),
    b("vary-count-1-unequal", "sweep half-wave --vary rload=1:2:1", "COUNT 1", "START = STOP"),
    b("vary-grid-too-large", "sweep half-wave --vary rload=1:1e6:100000", "100000 points",
      "raise --max-points"),
    b("vary-grid-product-too-large",
      "sweep half-wave --vary rload=10,100 --vary vpk=1:20:100 --vary freq=50,60 --vary cres=0,1u,1m",
      "1200 points", "raise --max-points"),
    b("vary-unknown-model", "sweep half-wave --vary diode=nosuch", "'nosuch'", "choose from sl_"),
    b("vary-same-name-twice", "sweep half-wave --vary rload=1,2 --vary rload=3,4", "twice",
      "vary each name once"),
    b("vary-nan-value", "sweep half-wave --vary rload=nan,1k", "'nan'", NOT_A_NUMBER),
    b("vary-empty-item", "sweep half-wave --vary rload=1,,2", "'' is not a number", NOT_A_NUMBER),
    b("vary-out-of-range", "sweep half-wave --vary rload=10:10meg:3:log", "outside its range",
      "choose a value inside"),
    b("vary-count-absurd", "sweep half-wave --vary rload=1:10:99999999999999999999999", "COUNT"),
    b("sweep-workers-0", "sweep half-wave --vary rload=1,2 --workers 0", "--workers must be at least 1"),
    b("sweep-workers-absurd", "sweep half-wave --vary rload=10,100 --workers 100000 --quiet",
      "--workers"),
    b("sweep-max-points-0", "sweep half-wave --vary rload=1,2 --max-points 0",
      "--max-points must be at least 1"),
    b("sweep-plot-harmonics-beyond", "sweep half-wave --vary rload=1,2 --plot-harmonics 99",
      "order 99", "raise --harmonics"),
    b("sweep-plot-harmonics-text", "sweep half-wave --vary rload=1,2 --plot-harmonics a,b", "'a,b'",
      "like 1,2,3"),
    # ----------------------------------------------------------------- design files (check)
    b("design-not-toml", "check notoml.toml", "notoml.toml:1", "not valid TOML", "fix the syntax",
      files=("notoml.toml",)),
    b("design-unknown-key", "check unkdesign.toml", "unkdesign.toml:2", "'circut'", "known keys here",
      files=("unkdesign.toml",)),
    b("design-missing-circuit", "check nocirc.toml", "missing key 'circuit'", 'circuit = "half-wave"',
      files=("nocirc.toml",)),
    b("design-unknown-metric", "check badmetric.toml", "'h2_foo' is not a metric", "use one of",
      files=("badmetric.toml",)),
    b("design-min-above-max", "check minmaxd.toml", "min 5 is above max 1", "swap them",
      files=("minmaxd.toml",)),
    b("design-harmonics-0", "check harm0.toml", "settings.harmonics", "1..1000", files=("harm0.toml",)),
    b("design-harmonics-absurd", "check harmbig.toml", "settings.harmonics", "1..1000",
      files=("harmbig.toml",)),
    b("design-empty-corner-list", "check emptycorner.toml", "corners.rload", "non-empty array",
      files=("emptycorner.toml",)),
    b("design-refused-netlist", "check refused.toml", "refused.toml:1: circuit:", "evil.cir, line 4",
      "refused '.control'", files=("refused.toml", "evil.cir")),
    b("design-nan-bound", "check nanbound.toml", "limit[1].max", "not a finite number",
      files=("nanbound.toml",)),
    b("design-bound-with-unit", "check unitbound.toml", "'5V'", "no units", files=("unitbound.toml",)),
    b("design-tolerance-nan", "check tolnan.toml", "settings.tolerance", "not a finite number",
      files=("tolnan.toml",)),
    b("design-parameter-inf", "check setinf.toml", "parameters.rload", "not a finite number",
      files=("setinf.toml",)),
    b("design-negative-thd-bound", "check negthd.toml", "thd is never negative", "fix the sign",
      files=("negthd.toml",)),
    b("design-harmonic-beyond-settings", "check h99.toml", "h99_v", "raise it to at least 99",
      files=("h99.toml",)),
    b("design-latin1", "check latind.toml", "latind.toml:2", "save the file as UTF-8", files=("latind.toml",)),
    b("design-binary", "check bind.toml", "bind.toml:1", "save the file as UTF-8", files=("bind.toml",)),
    b("design-missing-file", "check nothere.toml", "nothere.toml", "check the path"),
    b("design-empty-folder", "check sub", "folder sub", "holds no .toml", files=("sub/",)),
    b("design-glob-matches-nothing", ("check", "*.nomatch"), "no design file matches", "check the pattern"),
    b("design-nested-5000-deep", "check deepd.toml", "deepd.toml", files=("deepd.toml",)),
    b("design-circuit-outside-its-folder", "check designs/outside.toml", "outside",
      files=("designs/outside.toml", "elsewhere.cir")),
    b("design-huge", "check huged.toml", "huged.toml", "larger than", files=("huged.toml",)),
    # ----------------------------------------------------------------- resource bounds
    b("bound-tmax-1e-12", "run half-wave --tmax 1e-12", "2e+10 steps per period", "raise --tmax"),
    b("bound-max-steps", "run half-wave --max-steps 1000", "over the bound of 1e+03 steps", "raise --tmax"),
    b("bound-max-output", "run half-wave --max-output 0.01", "MiB", "raise the bound"),
]


def _lay_out(case: Bad, folder: Path) -> None:
    folder.mkdir(parents=True)
    for name in case.files:
        if name.endswith("/"):
            (folder / name.rstrip("/")).mkdir()
        else:
            (folder / name).parent.mkdir(parents=True, exist_ok=True)
            (folder / name).write_bytes(FILES[name]())
    (folder / "sub").mkdir(exist_ok=True)  # the folder an include card names


def _run(argv: tuple[str, ...], cwd: Path, timeout: float = 60.0) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, MPLBACKEND="Agg")
    env.setdefault("NGSPICE_LIBRARY_PATH", "libngspice.so.0")
    env.pop("SIMLOOP_TEST_FAULT", None)
    return subprocess.run([str(SIMLOOP), *argv], cwd=cwd, env=env, capture_output=True, text=True,
                          timeout=timeout, check=False)


def _param(case: Bad):
    marks = [pytest.mark.xfail(strict=True, reason=case.bug)] if case.bug else []
    return pytest.param(case, id=case.id, marks=marks)


def assert_refused(code: object, stdout: str, stderr: str, command: str) -> str:
    """Exit 2, no traceback, nothing on stdout, one stderr line ``simloop CMD: error: ...``."""
    assert "Traceback" not in stdout + stderr, stderr[-2000:]
    assert code == 2, (code, stdout[-500:], stderr[-500:])
    lines = stderr.splitlines()
    assert len(lines) == 1, stderr[-2000:]
    assert lines[0].startswith(f"simloop {command}: error: "), lines[0]
    assert stdout == "", stdout[-500:]
    return lines[0]


def test_catalogue_has_at_least_40_distinct_cases() -> None:
    ids = [c.id for c in CLI] + [c[0] for c in API] + [c[0] for c in API_BUGS]
    assert len(ids) == len(set(ids)) and len(ids) >= 40


@pytest.mark.parametrize("case", [_param(c) for c in CLI])
def test_cli_bad_input_one_line_exit_2(case: Bad, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                        capsys: pytest.CaptureFixture[str]) -> None:
    """In this process, through simloop.cli.main (what the console script calls). An exception
    that escapes main, or main's 'internal error' line for one it caught, fails the case."""
    from simloop.cli import main

    folder = tmp_path / "case"
    _lay_out(case, folder)
    monkeypatch.chdir(folder)
    monkeypatch.delenv("SIMLOOP_TEST_FAULT", raising=False)
    try:
        code = main([*case.argv, "--json", "out.json"])
    except SystemExit as exc:
        code = exc.code
    out, err = capsys.readouterr()
    line = assert_refused(code, out, err, case.argv[0])
    for fragment in case.must:
        assert fragment in line, (fragment, line)
    assert not (folder / "out.json").exists()


#: Cases also run through the installed console script, in parallel subprocesses: the script
#: prints no traceback and no other line either (import-time chatter, warnings).
SCRIPT_CASES = ("ideal-duty-nan", "ideal-trapezoid-edges-too-long", "set-with-unit",
                "probe-unknown-source", "netlist-binary", "netlist-circular-include",
                "netlist-undefined-parameter", "vary-grid-too-large", "design-refused-netlist",
                "design-unknown-metric", "netlist-name-too-long", "sidecar-nested-5000-deep")


@pytest.fixture(scope="module")
def script_outcomes(tmp_path_factory: pytest.TempPathFactory):
    """The SCRIPT_CASES through the real console script, four at a time: id -> (process, folder)."""
    if not SIMLOOP.is_file():
        pytest.fail(f"console script {SIMLOOP} is missing; install simloop: pip install -e .",
                    pytrace=False)
    root = tmp_path_factory.mktemp("bad-inputs")
    by_id = {c.id: c for c in CLI}

    def one(case_id: str):
        case = by_id[case_id]
        folder = root / case.id
        _lay_out(case, folder)
        return case.id, (_run((*case.argv, "--json", "out.json"), folder), folder)

    with ThreadPoolExecutor(max_workers=4) as threads:
        return dict(threads.map(one, SCRIPT_CASES))


@pytest.mark.parametrize("case", [_param(c) for c in CLI if c.id in SCRIPT_CASES])
def test_console_script_bad_input_one_line_exit_2(case: Bad, script_outcomes) -> None:
    proc, folder = script_outcomes[case.id]
    line = assert_refused(proc.returncode, proc.stdout, proc.stderr, case.argv[0])
    for fragment in case.must:
        assert fragment in line, (fragment, line)
    assert not (folder / "out.json").exists()


def test_run_tmax_1e_12_refused_before_the_engine_quickly(tmp_path: Path) -> None:
    """2e10 steps per 50 Hz period: refused by the resource bound, no engine run, in seconds."""
    began = time.monotonic()
    proc = _run(("run", "half-wave", "--tmax", "1e-12"), tmp_path, timeout=30.0)
    assert time.monotonic() - began < 10.0
    line = assert_refused(proc.returncode, proc.stdout, proc.stderr, "run")
    assert "TMAX 1e-12 s" in line and "raise --tmax" in line, line


def test_sweep_huge_count_refused_quickly(tmp_path: Path) -> None:
    try:
        proc = _run(("sweep", "half-wave", "--vary", "rload=1:10:30000000"), tmp_path, timeout=3.0)
    except subprocess.TimeoutExpired:
        pytest.fail("not refused within 3 s")
    line = assert_refused(proc.returncode, proc.stdout, proc.stderr, "sweep")
    # refused on the axis itself, before any value is generated
    assert "COUNT 30000000" in line and "thin the range" in line, line


# ---------------------------------------------------------------------------------- Python API
@pytest.fixture(scope="module")
def half_wave():
    return load_circuit("half-wave")


def _file(tmp_path: Path, *names: str) -> Path:
    for name in names:
        (tmp_path / name).write_bytes(FILES[name]())
    return tmp_path / names[0]


NAN = math.nan
T = np.linspace(0.0, 0.02, 101)

#: (id, call taking (template, tmp_path), expected exception type, words the message must hold)
API: list[tuple[str, Callable, type[SimloopError], tuple[str, ...]]] = [
    ("parse_number-overflow-with-suffix", lambda t, p: parse_number("1e400f"), InputError, ("finite",)),
    ("parse_number-blank", lambda t, p: parse_number("   ", what="--set rload"), InputError, ("--set rload",)),
    ("parse_number-percent", lambda t, p: parse_number("50%"), InputError, ("no units",)),
    ("parse_probe-fullwidth-letters", lambda t, p: parse_probe("v(\uff4fut)"), InputError, ("v(node)",)),
    ("parse_probe-unclosed", lambda t, p: parse_probe("v(out"), InputError, ("v(node)",)),
    ("parse_probe-two-currents", lambda t, p: parse_probe("i(v1,v2)"), InputError, ("one element",)),
    ("parse_assignment-overflow", lambda t, p: parse_assignment("rload=1e999", t), InputError, ("finite",)),
    ("parse_assignment-zero-frequency", lambda t, p: parse_assignment("freq=0", t), InputError,
     ("outside its range",)),
    ("parse_assignment-empty-value", lambda t, p: parse_assignment("vpk=", t), InputError, ("vpk",)),
    ("parse_vary-stop-overflow", lambda t, p: parse_vary("rload=1:1e400:3", t), InputError, ("finite",)),
    ("parse_vary-log-to-zero", lambda t, p: parse_vary("cres=1u:0:3:log", t), InputError, ("> 0",)),
    ("expand_grid-same-name", lambda t, p: expand_grid([Vary("rload", (1.0,)), Vary("rload", (2.0,))]),
     InputError, ("twice",)),
    ("expand_grid-over-bound", lambda t, p: expand_grid([Vary("rload", (1.0, 2.0, 3.0))], max_points=2),
     InputError, ("3 points",)),
    ("RunSettings-harmonics-0", lambda t, p: RunSettings(harmonics=0), InputError, ("1..1000",)),
    ("RunSettings-harmonics-1001", lambda t, p: RunSettings(harmonics=1001), InputError, ("1..1000",)),
    ("RunSettings-negative-fundamental", lambda t, p: RunSettings(fundamental_hz=-50.0), InputError,
     ("fundamental_hz",)),
    ("RunSettings-nan-amplitude", lambda t, p: RunSettings(amplitude=NAN), InputError, ("amplitude",)),
    ("RunSettings-unknown-ideal", lambda t, p: RunSettings(ideal_kind="sawtooth"), InputError, ("sawtooth",)),
    ("SteadySettings-tolerance-nan", lambda t, p: SteadySettings(tolerance=NAN), InputError, ("(0, 1)",)),
    ("SteadySettings-tolerance-1", lambda t, p: SteadySettings(tolerance=1.0), InputError, ("(0, 1)",)),
    ("SteadySettings-timeout-inf", lambda t, p: SteadySettings(timeout=math.inf), InputError, ("timeout",)),
    ("SteadySettings-negative-tmax", lambda t, p: SteadySettings(tmax=-1e-6), InputError, ("TMAX",)),
    ("SteadySettings-unknown-method", lambda t, p: SteadySettings(method="guess"), InputError, ("guess",)),
    ("SteadySettings-max-periods-5", lambda t, p: SteadySettings(max_periods=5), InputError, ("--max-periods",)),
    ("ideal_spectrum-harmonics-0", lambda t, p: ideal_spectrum("half-wave", amplitude=1.0, fundamental_hz=50.0,
                                                                harmonics=0), InputError, ("harmonics",)),
    ("ideal_spectrum-harmonics-1e9", lambda t, p: ideal_spectrum("half-wave", amplitude=1.0,
                                                                  fundamental_hz=50.0, harmonics=10**9),
     InputError, ("harmonics",)),
    ("ideal_spectrum-duty-1", lambda t, p: ideal_spectrum("pulse", amplitude=1.0, fundamental_hz=50.0,
                                                           duty=1.0, harmonics=5), InputError, ("duty",)),
    ("ideal_spectrum-duty-nan", lambda t, p: ideal_spectrum("pulse", amplitude=1.0, fundamental_hz=50.0,
                                                             duty=NAN, harmonics=5), InputError, ("duty",)),
    ("ideal_spectrum-amplitude-inf", lambda t, p: ideal_spectrum("square", amplitude=math.inf,
                                                                  fundamental_hz=50.0, harmonics=5),
     InputError, ("amplitude",)),
    ("ideal_spectrum-negative-fundamental", lambda t, p: ideal_spectrum("square", amplitude=1.0,
                                                                         fundamental_hz=-1.0, harmonics=5),
     InputError, ("fundamental_hz",)),
    ("ideal_spectrum-misspelt-keyword", lambda t, p: ideal_spectrum("pulse", amplitude=1.0, fundamental_hz=50.0,
                                                                     dutty=0.5, harmonics=5),
     InputError, ("duty",)),
    ("spectrum_from_samples-nan-sample", lambda t, p: spectrum_from_samples(
        T, np.where(T > 0.01, NAN, 1.0), fundamental_hz=50.0, harmonics=3), InputError, ("NaN",)),
    ("spectrum_from_samples-time-backwards", lambda t, p: spectrum_from_samples(
        T[::-1], np.sin(T), fundamental_hz=50.0, harmonics=3), InputError, ("strictly increasing",)),
    ("TransientRequest-nan-stop", lambda t, p: TransientRequest("t\nR1 a 0 1", stop=NAN, step=1e-6, tmax=1e-6),
     InputError, ("stop time",)),
    ("TransientRequest-empty-netlist", lambda t, p: TransientRequest("  ", stop=1e-3, step=1e-6, tmax=1e-6),
     InputError, ("empty",)),
    ("TransientRequest-control-card", lambda t, p: TransientRequest("t\n.control\n", stop=1e-3, step=1e-6,
                                                                     tmax=1e-6), InputError, (".control",)),
    ("TransientRequest-save-with-command", lambda t, p: TransientRequest(
        "t\nR1 a 0 1", stop=1e-3, step=1e-6, tmax=1e-6, save=("v(a);shell",)), InputError, ("save",)),
    ("EnginePool-0-workers", lambda t, p: EnginePool(0), InputError, ("workers",)),
    ("EnginePool-bool-workers", lambda t, p: EnginePool(True), InputError, ("workers",)),
    ("find_periodic_source-0-hz", lambda t, p: find_periodic_source("t\nV1 a 0 SIN(0 1 0)\n"), InputError,
     ("frequency",)),
    ("load_circuit-empty-file", lambda t, p: load_circuit(_file(p, "empty.cir")), InputError, ("SIN or PULSE",)),
    ("load_circuit-binary-file", lambda t, p: load_circuit(_file(p, "binary.cir")), NetlistRefused, ("NUL",)),
    ("load_circuit-circular-include", lambda t, p: load_circuit(_file(p, "circ.cir", "a.lib", "b.lib")),
     InputError, ("circular include",)),
    ("render-negative-load", lambda t, p: t.render({"rload": -1.0}), InputError, ("outside its range",)),
    ("render-unknown-parameter", lambda t, p: t.render({"nosuch": 1.0}), InputError, ("nosuch",)),
    ("render-model-not-allowed", lambda t, p: t.render({}, {"diode": "x"}), InputError, ("allowed",)),
    ("run_circuit-zero-load", lambda t, p: run_circuit(t, values={"rload": 0.0}), InputError,
     ("outside its range",)),
    ("run_circuit-unknown-probe", lambda t, p: run_circuit(t, settings=RunSettings(probe="v(nowhere)")),
     InputError, ("nowhere",)),
    ("run_circuit-tmax-over-bound", lambda t, p: run_circuit(
        t, settings=RunSettings(steady=SteadySettings(tmax=1e-12))), InputError, ("steps per period",)),
]

#: The same, for cases that show a bug: (id, call, expected type, words, the exact bug).
API_BUGS: list[tuple] = [
    ("parse_number-arabic-indic-digit", lambda t, p: parse_number("\u0663"), InputError, ("not a number",)),
    ("parse_number-fullwidth-digit", lambda t, p: parse_number("\uff11k"), InputError, ("not a number",)),
    ("parse_vary-count-absurd", lambda t, p: parse_vary("rload=1:10:99999999999999999999999", t),
     InputError, ("COUNT",)),
    ("render-string-value", lambda t, p: t.render({"rload": "1k"}), InputError, ("rload",)),
    ("render-none-value", lambda t, p: t.render({"rload": None}), InputError, ("rload",)),
    ("find_periodic_source-string-param", lambda t, p: find_periodic_source(
        "t\nV1 a 0 SIN(0 1 {f})\n", {"f": "x"}), InputError, ("f",)),
    ("RunSettings-bool-harmonics", lambda t, p: RunSettings(harmonics=True), InputError, ("harmonics",)),
    ("RunSettings-string-fundamental", lambda t, p: RunSettings(fundamental_hz="50"), InputError,
     ("fundamental_hz",)),
    ("SteadySettings-fractional-max-periods", lambda t, p: SteadySettings(max_periods=12.5), InputError,
     ("max_periods",)),
    ("SteadySettings-string-tolerance", lambda t, p: SteadySettings(tolerance="1e-6"), InputError,
     ("tolerance",)),
    ("load_circuit-name-too-long", lambda t, p: load_circuit("x" * 5000), InputError, ("no circuit",)),
]


def _api_params():
    for id_, call, kind, words in API:
        yield pytest.param(call, kind, words, id=id_)
    for id_, call, kind, words, *bug in API_BUGS:  # a fixed bug keeps its case, not its mark
        marks = [pytest.mark.xfail(strict=True, reason=bug[0])] if bug else []
        yield pytest.param(call, kind, words, id=id_, marks=marks)


@pytest.mark.parametrize(("call", "kind", "words"), list(_api_params()))
def test_api_bad_input_raises_documented_error(call, kind, words, half_wave, tmp_path: Path) -> None:
    with pytest.raises(SimloopError) as caught:
        call(half_wave, tmp_path)
    error = caught.value
    assert isinstance(error, kind), type(error)
    message = str(error)
    assert message.strip() and "\n" not in message, message
    for word in words:
        assert word in message, (word, message)
