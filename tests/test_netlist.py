"""Tests of simloop.netlist: built-in circuits, screening of untrusted netlists, rendering.

Tests marked ``engine`` run the ngspice program (``ngspice -b``); they fail, not skip, under
CI=true when ngspice is missing.
"""

from __future__ import annotations

import math
import os
import pickle
import re
import shutil
import subprocess
import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from simloop.errors import InputError, NetlistRefused
from simloop.netlist import (
    builtin_dir,
    find_periodic_source,
    list_builtin,
    load_circuit,
    models_dir,
    parse_assignment,
    screen,
)
from simloop.vocab import TIME_REFERENCES, WAVEFORM_KINDS

BUILTINS = ("half-wave", "full-wave-bridge", "centre-tap", "switching-stage")
NETLISTS = builtin_dir()


@pytest.fixture(scope="module")
def ngspice() -> str:
    exe = shutil.which("ngspice")
    if exe is None:
        if os.environ.get("CI") == "true":
            pytest.fail("ngspice is not installed; the CI machine must have it (apt-get install ngspice)")
        pytest.skip("ngspice is not installed")
    return exe


def _run_ngspice(exe: str, netlist: Path, *, cwd: Path) -> str:
    proc = subprocess.run([exe, "-b", str(netlist)], cwd=cwd, capture_output=True, text=True,
                          timeout=120, stdin=subprocess.DEVNULL)
    output = proc.stdout + proc.stderr
    assert proc.returncode == 0, output
    errors = [line for line in output.splitlines()
              if re.search(r"\berror\b|timestep too small|singular matrix", line, re.IGNORECASE)]
    assert not errors, "\n".join(errors)
    return output


def _measure(output: str, name: str) -> float:
    m = re.search(rf"^{name}\s*=\s*(\S+)", output, re.MULTILINE)
    assert m, f"no measurement {name} in ngspice output:\n{output[-2000:]}"
    return float(m.group(1))


def _params_of_file(path: Path) -> dict[str, str]:
    """The .param assignments of a netlist, read with a plain regex (independent of simloop)."""
    text = re.sub(r"\n\+", " ", path.read_text())
    found: dict[str, str] = {}
    for line in text.splitlines():
        if line.lower().startswith(".param"):
            for name, value in re.findall(r"(\w+)\s*=\s*(\S+)", line[len(".param"):]):
                found[name.lower()] = value
    return found


def _write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


# ------------------------------------------------------------------------------ built-ins
def test_list_builtin_has_the_four_circuits():
    names = [t.name for t in list_builtin()]
    assert set(BUILTINS) <= set(names)
    assert names == sorted(names)
    assert all(t.builtin and t.metadata_origin == "sidecar" for t in list_builtin())


@pytest.mark.parametrize("name", BUILTINS)
def test_load_circuit_builtin_params_match_metadata(name):
    with open(NETLISTS / f"{name}.toml", "rb") as fh:
        meta = tomllib.load(fh)
    in_file = _params_of_file(NETLISTS / f"{name}.cir")
    assert set(meta["parameters"]) == set(in_file)
    template = load_circuit(name)
    assert set(template.parameters) == set(in_file)
    for pname, spec in template.parameters.items():
        assert spec.unit and spec.meaning, pname
        assert spec.min is not None and spec.max is not None
        assert spec.min <= spec.default <= spec.max, pname


@pytest.mark.parametrize("name", BUILTINS)
def test_load_circuit_builtin_metadata_consistent(name):
    t = load_circuit(name)
    assert t.title and t.description
    assert t.ideal_kind in WAVEFORM_KINDS and t.estimate_kind in WAVEFORM_KINDS
    assert t.reference in TIME_REFERENCES
    assert t.parameters[t.fundamental_param].unit == "Hz"
    assert t.parameters[t.amplitude_param].unit == "V"
    assert t.default_probe is not None
    drive = t.render().drive
    assert drive is not None
    # the drive's frequency is the declared fundamental parameter
    assert drive.frequency == pytest.approx(t.parameters[t.fundamental_param].default, rel=1e-12)
    for choice in t.choices.values():
        for device in choice.devices:
            line = next(l for l in t.text.splitlines() if l.lower().startswith(device + " "))
            assert choice.default in line.lower().split()  # the file runs standalone with it


def test_load_circuit_rectifier_kinds():
    # common practice: rectifiers compare with rectified sines, switching stages with pulses
    assert load_circuit("half-wave").ideal_kind == "half-wave"
    assert load_circuit("full-wave-bridge").ideal_kind == "full-wave"
    assert load_circuit("centre-tap").ideal_kind == "full-wave"
    assert load_circuit("switching-stage").estimate_kind == "trapezoid"
    assert load_circuit("half-wave").conduction_probes[0].label == "i(vsense)"


def test_models_lib_has_our_models():
    text = (models_dir() / "diodes.lib").read_text()
    names = set(re.findall(r"^\.model\s+(\S+)\s+D\(", text, re.MULTILINE | re.IGNORECASE))
    assert names == {"sl_si_small", "sl_rect1a", "sl_schottky", "sl_fast", "sl_ideal"}


@pytest.mark.parametrize("name", BUILTINS)
def test_render_strips_analysis_and_includes(name):
    t = load_circuit(name)
    choices = list(t.choices.values())
    models = choices[0].allowed if choices else ("",)
    for model in models:
        r = t.render(choices={c.name: model for c in choices})
        cards = [l.strip().lower() for l in r.text.splitlines() if not l.lstrip().startswith("*")]
        for card in cards:
            assert not card.startswith((".tran", ".meas", ".inc", ".lib", ".print"))
            assert card != ".end"
        assert r.text.startswith("* ")
        if model:
            assert f".model {model} " in r.text.lower()
            for device in choices[0].devices:
                line = next(c for c in cards if c.startswith(device + " "))
                assert line.split()[3 if device[0] == "d" else 5] == model
    assert any(".tran" in note for note in t.render().notes)


def test_render_rewrites_param_defaults():
    r = load_circuit("half-wave").render({"RLOAD": 470, "vpk": 3.3, "cres": 1e-3})
    params = {}
    for line in r.text.splitlines():
        if line.lower().startswith(".param"):
            params.update(re.findall(r"(\w+)=(\S+)", line))
    assert float(params["rload"]) == 470 and float(params["vpk"]) == 3.3
    assert float(params["cres"]) == 1e-3 and float(params["freq"]) == 50
    assert r.parameters == {"vpk": 3.3, "freq": 50.0, "rsrc": 0.5, "rload": 470.0,
                            "cres": 1e-3, "resr": 0.05}
    assert r.choices == {"diode": "sl_rect1a"}


def test_render_unknown_parameter_lists_known():
    with pytest.raises(InputError, match=r"unknown parameter 'bogus'.*vpk, freq"):
        load_circuit("half-wave").render({"bogus": 1})


def test_render_out_of_range_names_range():
    with pytest.raises(InputError, match=r"rload = 0\.5 ohm is outside its range 1 \.\. 1e\+06"):
        load_circuit("half-wave").render({"rload": 0.5})


def test_render_rejects_bad_choice():
    t = load_circuit("half-wave")
    with pytest.raises(InputError, match="not one of the models allowed: sl_fast"):
        t.render(choices={"diode": "xyz"})
    with pytest.raises(InputError, match="unknown choice 'transistor'; choices are: diode"):
        t.render(choices={"transistor": "sl_fast"})


def test_render_pulse_longer_than_period_refused():
    with pytest.raises(InputError, match="longer than the period"):
        load_circuit("switching-stage").render({"fsw": 1e3, "duty": 0.98, "trise": 1e-4,
                                                "tfall": 1e-4})


def test_render_pickles_for_worker_processes():
    t = load_circuit("centre-tap")
    r = t.render({"rload": 10})
    assert pickle.loads(pickle.dumps(r)) == r
    assert pickle.loads(pickle.dumps(t)).render({"rload": 10}) == r


# ------------------------------------------------------------------------------ engine runs
@pytest.mark.engine
@pytest.mark.parametrize("name", BUILTINS)
def test_builtin_runs_standalone_in_ngspice(ngspice, name):
    output = _run_ngspice(ngspice, NETLISTS / f"{name}.cir", cwd=NETLISTS.parent)
    assert "Measurements for Transient Analysis" in output


def _rendered_run(exe, tmp_path, name, values, choices, analysis):
    r = load_circuit(name).render(values, choices)
    path = tmp_path / "deck.cir"  # an empty folder: nothing to include from
    path.write_text(r.text + analysis + "\n.end\n")
    return _run_ngspice(exe, path, cwd=tmp_path)


@pytest.mark.engine
def test_render_half_wave_ideal_mean_matches_a_over_pi(ngspice, tmp_path):
    vpk, rs, rl = 10.0, 1e-3, 1e3
    out = _rendered_run(ngspice, tmp_path, "half-wave", {"vpk": vpk, "rsrc": rs, "rload": rl},
                        {"diode": "sl_ideal"},
                        ".tran 20u 200m 0 20u\n.meas tran vavg AVG v(out) from=100m to=200m")
    # Spiegel, Mathematical Handbook (Schaum), Fourier series of the half-wave sine: a0 = A/pi
    # [from memory]. A = vpk * rl/(rl + rs). sl_ideal drops N Vt ln(I/IS) ~ 0.7 mV at 10 mA,
    # 7e-5 of 10 V: the tolerance is twice that.
    assert _measure(out, "vavg") == pytest.approx(vpk / math.pi * rl / (rl + rs), rel=1.5e-4)


@pytest.mark.engine
def test_render_bridge_ideal_mean_matches_2a_over_pi(ngspice, tmp_path):
    vpk, rs, rl = 10.0, 1e-3, 1e3
    out = _rendered_run(ngspice, tmp_path, "full-wave-bridge",
                        {"vpk": vpk, "rsrc": rs, "rload": rl}, {"diode": "sl_ideal"},
                        ".tran 20u 200m 0 20u\n.meas tran vavg AVG v(out) from=100m to=200m")
    # Full-wave |A sin|: a0 = 2A/pi (Spiegel, Schaum, Fourier series table [from memory]);
    # two sl_ideal drops in series, ~1.4 mV of 10 V (1.4e-4): the tolerance is twice that.
    assert _measure(out, "vavg") == pytest.approx(2 * vpk / math.pi * rl / (rl + rs), rel=3e-4)


@pytest.mark.engine
def test_render_centre_tap_ideal_mean_matches_2a_over_pi(ngspice, tmp_path):
    vsec, k = 10.0, 0.99999
    out = _rendered_run(ngspice, tmp_path, "centre-tap",
                        {"vsec": vsec, "kc": k, "rpri": 1e-3, "rsec": 1e-3, "rload": 1e3},
                        {"diode": "sl_ideal"},
                        ".tran 20u 200m 0 20u\n.meas tran vavg AVG v(out) from=100m to=200m")
    # Coupled inductors: open-circuit secondary = k sqrt(Ls/Lp) vp = k vsec; full-wave mean
    # 2A/pi (Spiegel, Schaum [from memory]). A wrong winding polarity would give A/pi.
    # One sl_ideal drop (7e-5 of 10 V) plus leakage-inductance drop: tolerance 1.5e-4.
    assert _measure(out, "vavg") == pytest.approx(2 * k * vsec / math.pi, rel=1.5e-4)


@pytest.mark.engine
def test_render_switching_stage_mean_matches_duty(ngspice, tmp_path):
    vdd, rl, ron, roff, d = 12.0, 50.0, 0.2, 1e6, 0.25
    out = _rendered_run(ngspice, tmp_path, "switching-stage",
                        {"vdd": vdd, "rload": rl, "ron": ron, "roff": roff, "duty": d,
                         "lpar": 0, "cpar": 0},
                        {}, ".tran 0.5n 20u 0 0.5n\n"
                        ".meas tran vavg AVG par('v(top)-v(drain)') from=10u to=20u")
    # Pulse train of duty d: DC = A d (Oppenheim & Willsky, Signals and Systems, 2nd ed. 1997,
    # Example 3.5 [from memory]); the switch toggles at the 50 % points of the gate's linear
    # ramps, so d is exact; on/off levels are the resistive dividers. The switch instants are
    # resolved to a fraction of the 0.5 ns step (one step is 2e-3 of the 250 ns on-time).
    expected = d * vdd * rl / (rl + ron) + (1 - d) * vdd * rl / (rl + roff)
    assert _measure(out, "vavg") == pytest.approx(expected, rel=5e-4)


# ------------------------------------------------------------------------------ screening
def _refused(text: str, **kwargs) -> str:
    kwargs.setdefault("source_dir", None)
    kwargs.setdefault("allowed_dirs", ())
    with pytest.raises(NetlistRefused) as info:
        screen(text, **kwargs)
    message = str(info.value)
    assert "\n" not in message
    return message


@pytest.mark.parametrize(
    ("line", "token"),
    [
        (".control", ".control"),
        (".CONTROL", ".control"),
        ("   .Control", ".control"),
        (".controlx", ".control"),  # ngspice opens a block on the prefix (checked: ngspice 39)
        (".endc", ".endc"),
        ("R1 a b `echo 1`", "`"),
        ("shell rm -rf x", "shell"),
        ("R1 a SHELL 1k", "shell"),
        ("codemodel /tmp/x.cm", "codemodel"),
        ("pre_osdi /tmp/x.osdi", "osdi"),
        ("osdi x.osdi", "osdi"),
        ("R1 a b 1k ; shell", "shell"),  # inline comments are screened too
        (".model fs filesource(file=\"x\")", "filesource"),
        (".model dn numd level=1", "numd"),
        (".csparam ngdebug=1", ".csparam"),
    ],
)
def test_screen_refuses_forbidden_tokens(line, token):
    message = _refused(f"title\nV1 a 0 1\n{line}\n.end\n")
    assert message.startswith("netlist, line 3: refused") and repr(token) in message


@pytest.mark.parametrize("line", ["*# echo hi", "   *# shell", "*#echo"])
def test_screen_refuses_hash_command_comments(line):
    # ngspice 39 runs '*#' comment lines as commands (checked with ngspice -b)
    assert "line 2" in _refused(f"title\n{line}\n")


def test_screen_refuses_ng_script_even_in_a_comment():
    assert "ng_script" in _refused("*ng_script\necho hi\n")


def test_screen_accepts_words_in_plain_comments():
    screen("title\n* the shell of the box; .control is refused\n* # not a command\nR1 a 0 1\n",
           source_dir=None, allowed_dirs=())


@pytest.mark.parametrize(
    "split",
    [".con\n+trol", ".con\n* comment between\n+trol", "R1 a b she\n+ll", "X1 a b `\n+ sub"],
)
def test_screen_refuses_tokens_split_across_continuation(split):
    # ngspice joins '+' lines with a space; joining without one is checked as well
    _refused(f"title\n{split}\n")


def test_screen_refuses_control_characters_and_bad_text():
    assert "NUL" in _refused("title\nR1 a 0 1\x00k\n")
    assert "control character" in _refused("title\nR1 a 0 1k\x1b\n")
    assert "control character" in _refused("title\nR1 a 0 1k\rR2 b 0 1\n")
    assert "UTF-8" in _refused("title\nR1 a 0 \udcff\n")
    assert "larger than" in _refused("title\n" + "* x\n" * 600_000)


def test_load_circuit_refuses_non_utf8_nul_and_huge_files(tmp_path):
    bad = tmp_path / "latin.cir"
    bad.write_bytes(b"t\nR1 a 0 1k \xe9\n")
    with pytest.raises(NetlistRefused, match="line 2: not valid UTF-8"):
        load_circuit(bad)
    nul = tmp_path / "nul.cir"
    nul.write_bytes(b"t\nV1 a 0 SIN(0 1 50)\n\x00\n")
    with pytest.raises(NetlistRefused, match="line 3: a NUL byte"):
        load_circuit(nul)
    huge = tmp_path / "huge.cir"
    huge.write_bytes(b"t\n" + b"* padding\n" * 220_000)
    with pytest.raises(NetlistRefused, match="larger than the 2097152 bytes"):
        load_circuit(huge)


def test_screen_refuses_include_outside_allowed(tmp_path):
    inside = tmp_path / "work"
    inside.mkdir()
    (tmp_path / "secret.lib").write_text(".model x D\n")
    (inside / "ok.lib").write_text(".model y D\n")
    (inside / "link.lib").symlink_to(tmp_path / "secret.lib")
    kw = {"source_dir": inside, "allowed_dirs": (inside, models_dir())}
    screen("t\n.include ok.lib\n.include \"ok.lib\"\n", **kw)
    screen(f"t\n.include {models_dir() / 'diodes.lib'}\n", **kw)
    for card in (".include ../secret.lib", ".INCLUDE ../secret.lib", ".inc ../secret.lib",
                 ".incl ../secret.lib", f".include {tmp_path / 'secret.lib'}",
                 ".include link.lib", ".lib ../secret.lib fast", "  .lib ../secret.lib",
                 ".include 'sub dir/../../secret.lib'", ".include ~/secret.lib",
                 ".include /etc/passwd", ".inc\n+lude ../secret.lib"):
        message = _refused(f"t\n{card}\n", **kw)
        assert "outside" in message and "line 2" in message


def test_screen_refuses_relative_include_without_folder():
    assert "has no folder" in _refused("t\n.include models/diodes.lib\n")


def test_load_circuit_inlines_includes_recursively(tmp_path):
    (tmp_path / "lib").mkdir()
    _write(tmp_path / "lib" / "inner.lib", ".model dz D(IS=1e-12)\n")
    _write(tmp_path / "lib" / "outer.lib", "* outer\n.include inner.lib\n")
    _write(tmp_path / "sections.lib",
           ".lib slow\n.model dslow D(TT=1u)\n.endl\n.lib fast\n.model dfast D(TT=1n)\n.endl\n")
    net = _write(tmp_path / "user.cir",
                 "user rectifier\n.include lib/outer.lib\n.lib sections.lib fast\n"
                 ".param vp=5 f0=1k\nV1 a 0 SIN(0 {vp} {f0})\nD1 a out dz\nR1 out 0 1k\n"
                 ".tran 1u 5m\n.end\n")
    t = load_circuit(net)
    r = t.render()
    assert ".model dz" in r.text and ".model dfast" in r.text and ".model dslow" not in r.text
    assert ".include" not in r.text.lower().replace("* begin include", "").replace(
        "* end include", "")
    assert t.metadata_origin == "inferred" and not t.builtin


def test_render_drops_analysis_cards_with_notes(tmp_path):
    net = _write(tmp_path / "n.cir",
                 "t\nV1 a 0 SIN(0 1 1k)\nR1 a 0 1k\n.options reltol=1e-4 INTERP\n.op\n"
                 ".ac dec 10 1 1meg\n.tran 1u 1m\n.print tran v(a)\n.save v(a)\n"
                 ".four 1k v(a)\n.end\nR2 a 0 1\n")
    r = load_circuit(net).render()
    cards = [l.lower().split()[0] for l in r.text.splitlines() if not l.startswith("*")]
    assert cards == ["v1", "r1", ".options"]  # nothing after .end either
    assert "interp" not in r.text.lower() and "reltol=1e-4" in r.text
    notes = " | ".join(r.notes)
    for part in ("own .tran card (line 7)", "dropped the .op analysis (line 5)",
                 "dropped the .ac analysis", "dropped .print", "dropped .save", "dropped .four",
                 "removed 'interp' from .options (line 4)"):
        assert part in notes


def test_load_circuit_lib_without_file_or_section(tmp_path):
    net = _write(tmp_path / "n.cir", "t\n.lib missing.lib\nV1 a 0 SIN(0 1 50)\nR1 a 0 1\n")
    with pytest.raises(InputError, match="'.lib missing.lib' is neither a file nor a section"):
        load_circuit(net)


def test_load_circuit_detects_circular_include(tmp_path):
    _write(tmp_path / "a.lib", ".include b.lib\n")
    _write(tmp_path / "b.lib", "* b\n.include a.lib\n")
    net = _write(tmp_path / "loop.cir", "t\n.include a.lib\nV1 a 0 SIN(0 1 50)\n")
    with pytest.raises(InputError, match=r"circular include .*a\.lib -> b\.lib -> a\.lib"):
        load_circuit(net)


def test_load_circuit_refuses_forbidden_in_included_file(tmp_path):
    _write(tmp_path / "evil.lib", ".model x D\n.control\nshell id\n.endc\n")
    net = _write(tmp_path / "n.cir", "t\n.include evil.lib\nV1 a 0 SIN(0 1 50)\n")
    with pytest.raises(NetlistRefused, match=r"include evil\.lib, line 2: refused '\.control'"):
        load_circuit(net)


def test_load_circuit_refuses_symlinked_include_escape(tmp_path):
    outside = tmp_path / "outside"
    outside.mkdir()
    _write(outside / "x.lib", ".model x D\n")
    work = tmp_path / "work"
    work.mkdir()
    (work / "models").symlink_to(outside, target_is_directory=True)
    net = _write(work / "n.cir", "t\n.include models/x.lib\nV1 a 0 SIN(0 1 50)\n")
    with pytest.raises(NetlistRefused, match="outside"):
        load_circuit(net)


_WRAP = st.text(st.characters(exclude_characters="\n"), max_size=20)
_TOKENS = st.sampled_from([".control", ".endc", "`", "shell", "codemodel", "osdi",
                           ".CoNtRoL", "SHELL", "OSDI", "pre_osdi", "ng_script"])


@settings(max_examples=300, deadline=None)
@given(prefix=_WRAP, token=_TOKENS, suffix=_WRAP)
def test_screen_fuzz_wrapped_tokens_always_refused(prefix, token, suffix):
    # 'R1 ' first, so the line never turns into a '*' comment
    _refused(f"title\nR1 {prefix}{token}{suffix}\n")


@settings(max_examples=200, deadline=None)
@given(token=_TOKENS, cut=st.integers(1, 8), blank=st.sampled_from(["", " ", "\t"]))
def test_screen_fuzz_tokens_split_by_continuation_refused(token, cut, blank):
    cut = min(cut, max(1, len(token) - 1))
    _refused(f"title\nR1 a b {token[:cut]}\n{blank}+{token[cut:]}\n")


# ------------------------------------------------------------------------------ user netlists
def test_load_circuit_user_netlist_inferred(tmp_path):
    net = _write(tmp_path / "doubler.cir",
                 "RF doubler\n.param f0=2meg vdrive=3 rl=50\n"
                 "Vs in 0 SIN(0 {vdrive} {f0})\nD1 in out dmix\nR1 out 0 {rl}\n"
                 ".model dmix D(IS=1e-8 N=1.05)\n.tran 1n 10u\n.end\n")
    t = load_circuit(str(net))
    assert t.name == "doubler" and t.title == "RF doubler"
    assert t.fundamental_param == "f0" and t.amplitude_param == "vdrive"
    assert t.reference == "sine" and t.ideal_kind is None
    assert t.parameters["f0"].default == 2e6 and t.parameters["f0"].unit == ""
    assert t.parameters["rl"].min is None
    assert t.default_probe.label == "v(out)"
    r = t.render({"f0": 1e6})
    assert r.drive.frequency == 1e6


def test_load_circuit_user_netlist_with_sidecar(tmp_path):
    net = _write(tmp_path / "det.cir",
                 "detector\n.include models/diodes.lib\n.param f0=1meg vpk=1\n"
                 "Vs in 0 SIN(0 {vpk} {f0})\nVsense in a 0\nDx a out sl_schottky\nR1 out 0 1k\n")
    (tmp_path / "models").mkdir()
    shutil.copy(models_dir() / "diodes.lib", tmp_path / "models" / "diodes.lib")
    _write(tmp_path / "det.toml",
           'title = "RF detector"\nfundamental_param = "f0"\namplitude_param = "vpk"\n'
           'default_probe = "v(out)"\nideal_kind = "half-wave"\n'
           '[parameters]\nf0 = { unit = "Hz", meaning = "carrier", min = 1e3, max = 1e8 }\n'
           '[probes]\nid = "i(vsense)"\n'
           '[choices.diode]\ndefault = "sl_schottky"\ndevices = ["Dx"]\n'
           'allowed = ["sl_schottky", "sl_ideal"]\n')
    t = load_circuit(net)
    assert t.metadata_origin == "sidecar" and t.title == "RF detector"
    assert t.parameters["vpk"].unit == ""  # no metadata given for it
    assert t.probe("id").label == "i(vsense)" and t.probe("v(a, out)").label == "v(a,out)"
    with pytest.raises(InputError, match="no node 'nowhere'"):
        t.probe("v(nowhere)")
    with pytest.raises(InputError, match=r"range 1000 \.\. 1e\+08"):
        t.render({"f0": 10})
    assert "Dx     a out sl_ideal".split() in [
        l.split() for l in t.render(choices={"diode": "SL_IDEAL"}).text.splitlines()]


def test_load_circuit_sidecar_errors(tmp_path):
    net = _write(tmp_path / "c.cir", "t\n.param f0=50\nV1 a 0 SIN(0 1 {f0})\nR1 a 0 1k\n")
    side = tmp_path / "c.toml"
    for body, pattern in [
        ('[parameters]\nfx = { unit = "Hz" }\n', "parameter 'fx' has no .param line"),
        ('fundemental_param = "f0"\n', "unknown keys fundemental_param"),
        ('default_probe = "v(nope)"\n', "no node 'nope'"),
        ('[parameters]\nf0 = { unit = "Hz", min = 60, max = 70 }\n', "outside its range"),
        ('ideal_kind = "sawtooth"\n', "ideal_kind 'sawtooth' is not one of"),
        ('[choices.diode]\ndefault = "d"\ndevices = ["D9"]\n', "device 'd9' is not in"),
        ("title = [", "not valid TOML"),
    ]:
        side.write_text(body)
        with pytest.raises(InputError, match=pattern):
            load_circuit(net)


def test_load_circuit_undefined_parameter_named(tmp_path):
    net = _write(tmp_path / "u.cir", "t\n.param f0=50\nV1 a 0 SIN(0 {vamp*2} {f0})\nR1 a 0 1k\n")
    with pytest.raises(InputError, match=r"parameter 'vamp' is used in \{vamp\*2\} but never defined"):
        load_circuit(net)


def test_load_circuit_unknown_name():
    with pytest.raises(InputError, match="not a built-in .*half-wave"):
        load_circuit("no-such-circuit")


# ------------------------------------------------------------------------------ sources
def test_find_periodic_source_sin_with_params():
    text = ("t\n.param vsec=12 ratio=0.04 f0=60 td=1m\n"
            "Vp p 0 DC 0 SIN(0.5 {vsec/ratio} {f0} {td} 0 {45})\n")
    s = find_periodic_source(text)
    assert (s.kind, s.name) == ("sin", "vp")
    assert s.amplitude == pytest.approx(300.0, rel=1e-15) and s.offset == 0.5
    assert s.frequency == 60.0 and s.delay == 1e-3 and s.phase_deg == 45
    # v = VO + VA sin(2 pi f (t - TD) + phase): rising zero crossing (of the sine part) where
    # the argument is 0
    assert s.time_origin == pytest.approx(1e-3 - 45 / 360 / 60, rel=1e-15)
    assert find_periodic_source(text, {"F0": 50}).frequency == 50.0


def test_find_periodic_source_pulse_with_params():
    text = ("t\n.param fsw=500k d=0.3 tr=20n\n"
            "Vg g 0 PULSE(0 {5} 0 {tr} {tr} {d/fsw-tr} {1/fsw})\nR1 g 0 1k\n")
    s = find_periodic_source(text)
    assert s.kind == "pulse" and s.frequency == pytest.approx(5e5, rel=1e-15)
    assert (s.v1, s.v2, s.amplitude) == (0.0, 5.0, 5.0)
    assert s.width == pytest.approx(0.6e-6 - 20e-9, rel=1e-12)
    # 50 %-point width = PW + (TR + TF)/2 = d/fsw exactly
    assert s.duty == pytest.approx(0.3, rel=1e-12)


def test_find_periodic_source_switching_stage_centred_on_zero():
    t = load_circuit("switching-stage")
    s = t.render({"duty": 0.4, "trise": 30e-9, "tfall": 50e-9}).drive
    rising_50 = s.delay + s.rise / 2
    falling_50 = s.delay + s.rise + s.width + s.fall / 2
    assert (rising_50 + falling_50) / 2 == pytest.approx(s.period, rel=1e-12)  # centre at T = 0
    assert (falling_50 - rising_50) / s.period == pytest.approx(0.4, rel=1e-12)


def test_find_periodic_source_spice_suffixes():
    s = find_periodic_source("t\nV1 a 0 sin 0 1.5 2MEG\n")
    assert s.frequency == 2e6 and s.amplitude == 1.5


@pytest.mark.parametrize(
    ("card", "pattern"),
    [
        ("V1 a 0 DC 1", "no SIN or PULSE source"),
        ("V1 a 0 SIN(0 1 50 0 10)", "damped"),
        ("V1 a 0 PULSE(0 1 0 1n 1n 1u)", "needs all of"),
        ("V1 a 0 PULSE(0 1 0 0 1n 1u 2u)", "TR > 0"),
        ("V1 a 0 PULSE(0 1 0 1n 1n 1u 2u 5)", "pulse count"),
        ("V1 a 0 SIN(0 1 {fx})", "unknown 'fx'"),
    ],
)
def test_find_periodic_source_refusals(card, pattern):
    with pytest.raises(InputError, match=pattern):
        find_periodic_source(f"t\n{card}\n")


# ------------------------------------------------------------------------------ --set
@pytest.mark.parametrize(
    ("text", "expected"),
    # SPICE scale suffixes: k 1e3, u 1e-6, meg 1e6 (common practice)
    [("RL=1k", ("rl", 1e3)), ("cres=10u", ("cres", 10e-6)), ("freq = 2meg", ("freq", 2e6)),
     ("c=4.7e-9", ("c", 4.7e-9)), ("VPK=-3.3", ("vpk", -3.3))],
)
def test_parse_assignment_accepts_numbers(text, expected):
    name, value = parse_assignment(text)
    assert name == expected[0] and value == pytest.approx(expected[1], rel=1e-15)


@pytest.mark.parametrize("text", ["RL=1k;.control", "RL={x}", "RL=1e999", "RL=nan", "RL=inf",
                                  "RL=", "=1k", "RL", "RL=10uF", "R L=1", "RL=1k 2k",
                                  "RL=`id`"])
def test_parse_assignment_refuses_bad(text):
    with pytest.raises(InputError) as info:
        parse_assignment(text)
    assert "\n" not in str(info.value)


def test_parse_assignment_with_template():
    t = load_circuit("half-wave")
    assert parse_assignment("RLOAD=1k", t) == ("rload", 1000.0)
    assert parse_assignment("Diode=SL_Schottky", t) == ("diode", "sl_schottky")
    with pytest.raises(InputError, match="known: vpk, freq, rsrc, rload, cres, resr, diode"):
        parse_assignment("rl=1k", t)
    with pytest.raises(InputError, match="outside its range"):
        parse_assignment("freq=1g", t)
    with pytest.raises(InputError, match="not one of the models allowed"):
        parse_assignment("diode=1k", t)
    with pytest.raises(InputError, match="not a number"):
        parse_assignment("rload=sl_fast", t)
