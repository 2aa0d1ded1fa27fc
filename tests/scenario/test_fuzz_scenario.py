"""Fuzzed scenario files: malformed input only ever gives ScenarioError naming the key, never another
exception, a hang or a file outside the output folder.

Inputs per test by default (``settings.default.max_examples`` = 10, times the factor in each
``@settings``): mutated valid scenarios 400 (through TOML text) + 400 (as dicts), random bytes 200,
random TOML-like text 200, output paths 30 (full runs through the command line); plus fixed cases.
"""

from __future__ import annotations

import copy
import math
import os
import re
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from popdens.cli import main
from popdens.exceptions import ScenarioError
from popdens.scenario import load_scenario, parse_scenario

N = settings.default.max_examples
# deadline: a parse takes milliseconds; 10 s means "hung" even on a loaded machine
FUZZ = dict(deadline=10_000, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])

VALID = {
    "scenario": {"title": "fuzz base", "output": "out"},
    "neuron": {"model": "custom", "drift": "-(u - rest) + a * exp(u / 10)", "tau_m": 10.0, "threshold": 20.0,
               "reset": 0.0, "refractory": 2.0, "parameters": {"rest": 0.0, "a": 0.1}},
    "noise": {"kind": "escape", "hazard": {"shape": "exponential", "rate": 20.0, "width": 2.0}},
    "input": {"shape": "pulse", "t": 5.0, "duration": 5.0, "base": 12.0, "amplitude": 4.0},
    "run": {"t_end": 20.0, "dt": 0.1, "record_interval": 1.0, "montecarlo_neurons": 10, "seed": 3},
}


# ------------------------------------------------------------------ a small TOML writer (test only)
def toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        out = []
        for c in v:
            if c in '"\\':
                out.append("\\" + c)
            elif ord(c) < 32 or ord(c) == 127 or 0xD800 <= ord(c) <= 0xDFFF:
                out.append(f"\\u{ord(c):04x}" if not 0xD800 <= ord(c) <= 0xDFFF else "?")
            else:
                out.append(c)
        return '"' + "".join(out) + '"'
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{toml_key(k)} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(v)


def toml_key(k: str) -> str:
    return k if k and all(c.isalnum() or c in "_-" for c in k) and k.isascii() else toml_value(k)


def to_toml(data: dict) -> str:
    lines = []
    for k, v in data.items():
        if not isinstance(v, dict):
            lines.append(f"{toml_key(k)} = {toml_value(v)}")
    for k, v in data.items():
        if isinstance(v, dict):
            lines.append(f"[{toml_key(k)}]")
            for kk, vv in v.items():
                lines.append(f"{toml_key(kk)} = {toml_value(vv)}")
    return "\n".join(lines) + "\n"


def test_toml_writer_round_trips_the_base_scenario():
    assert tomllib.loads(to_toml(VALID)) == VALID
    parse_scenario(tomllib.loads(to_toml(VALID)), "base.toml")  # the base itself is valid


# ------------------------------------------------------------------ strategies
leaf = st.one_of(
    st.booleans(),
    st.integers(),
    st.integers(min_value=10**300, max_value=10**400),  # beyond float range
    st.integers(-(2**63), 2**63 - 1),
    st.floats(),  # includes nan, inf, subnormals
    st.sampled_from([1e308, -1e308, 5e-324, 0.0, -0.0, 1e-300, 1e300]),
    st.text(max_size=30),
    st.sampled_from(["", " ", "..", "../x", "/etc", "LIF", "exp(u)", "__import__('os')", "u.__class__",
                     "lambda: 1", "10**10**10", "((2**64)**64)**64", "\x00", "\udcff", "ü", "1e999"]),
)
garbage = st.recursive(leaf, lambda c: st.one_of(st.lists(c, max_size=4),
                                                 st.dictionaries(st.text(max_size=8), c, max_size=4)),
                       max_leaves=12)


def paths(d, prefix=()):
    for k, v in d.items():
        yield prefix + (k,)
        if isinstance(v, dict):
            yield from paths(v, prefix + (k,))


ALL_PATHS = list(paths(VALID))


@st.composite
def mutated(draw):
    """(scenario dict, kind, key) with one mutation: a replaced value, a removed key or an unknown key."""
    data = copy.deepcopy(VALID)
    path = draw(st.sampled_from(ALL_PATHS))
    kind = draw(st.sampled_from(["replace", "remove", "add"]))
    parent = data
    for k in path[:-1]:
        parent = parent[k]
    key = path[-1]
    if kind == "replace":
        parent[key] = draw(garbage)
    elif kind == "remove":
        del parent[key]
    else:
        table = parent[key] if isinstance(parent[key], dict) else parent
        key = draw(st.text(min_size=1, max_size=12).filter(lambda s: s not in table))
        table[key] = draw(garbage)
    return data, kind, key


def data_value(data, key):
    """The value under ``key`` anywhere in ``data`` (keys of the base scenario are unique)."""
    for k, v in data.items():
        if k == key:
            return v
        if isinstance(v, dict):
            found = data_value(v, key)
            if found is not None:
                return found
    return None


def kind_of(v) -> str:
    if isinstance(v, bool):
        return "bool"
    return "number" if isinstance(v, (int, float)) else type(v).__name__


def check_outcome(data, kind, key, load):
    """Either a valid scenario or ScenarioError whose message names the key concerned."""
    try:
        load(data)
    except ScenarioError as exc:
        msg = str(exc)
        # every message names a key in backticks (or a whole table in brackets) ...
        assert re.search(r"`[^`]+`|\[[\w.]+\] = ", msg), msg
        # ... and the key concerned when its value has the wrong type; a value of the right type
        # can instead break a dependent key (a removed `parameters` table breaks the `drift`)
        if kind == "replace" and kind_of(data_value(data, key)) != kind_of(data_value(VALID, key)):
            assert f"`{key}`" in msg or f"[{key}]" in msg or f".{key}]" in msg, msg
        return "error"
    return "ok"


@settings(max_examples=40 * N, **FUZZ)
@given(case=mutated())
def test_mutated_scenario_dicts_give_only_scenario_errors(case):
    data, kind, key = case
    check_outcome(data, kind, key, lambda d: parse_scenario(d, "fuzz.toml"))


@settings(max_examples=40 * N, **FUZZ)
@given(case=mutated())
def test_mutated_scenario_files_give_only_scenario_errors(case, tmp_path):
    data, kind, key = case
    try:
        text = to_toml(data)
        tomllib.loads(text)
    except (TypeError, tomllib.TOMLDecodeError):  # not expressible in TOML (e.g. a key clash)
        return
    p = tmp_path / "fuzz.toml"
    p.write_text(text, encoding="utf-8")
    check_outcome(data, kind, key, lambda d: load_scenario(p))


@settings(max_examples=20 * N, **FUZZ)
@given(raw=st.binary(max_size=400))
def test_random_bytes_give_only_scenario_errors(raw, tmp_path):
    p = tmp_path / "bytes.toml"
    p.write_bytes(raw)
    with pytest.raises(ScenarioError):
        load_scenario(p)


toml_alphabet = st.sampled_from(list("[]{}=.,\"'#\n abcdefghijklmnopqrstuvwxyz0123456789_-+:") +
                                ["neuron", "noise", "input", "run", "scenario", "model", "t_end", "inf", "nan",
                                 "\"LIF\"", "true", "1e999", "[[", "]]", "\\u0000"])


@settings(max_examples=20 * N, **FUZZ)
@given(parts=st.lists(toml_alphabet, max_size=80))
def test_random_toml_like_text_gives_only_scenario_errors(parts, tmp_path):
    p = tmp_path / "text.toml"
    p.write_text("".join(parts), encoding="utf-8")
    with pytest.raises(ScenarioError):
        load_scenario(p)


def test_empty_or_unprintable_unknown_keys_are_shown_quoted():
    # regression: an empty key gave the message "unknown key ``"
    for key in ("", " ", "\n", "a`b"):
        data = copy.deepcopy(VALID)
        data["scenario"][key] = 1
        with pytest.raises(ScenarioError, match=re.escape(f"unknown key `{key!r}`")):
            parse_scenario(data, "fuzz.toml")


@pytest.mark.parametrize("text", [
    "a = " + "[" * 50_000 + "]" * 50_000,  # regression: the TOML reader raised RecursionError
    "a = " + "{b = " * 5000 + "1" + "}" * 5000,
    "[neuron]\ntau_m = " + "[" * 500 + "1" + "]" * 500,
])
def test_deep_nesting_is_a_scenario_error(text, tmp_path):
    p = tmp_path / "deep.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(ScenarioError, match="nested too deeply|top level|tau_m"):
        load_scenario(p)


def test_non_utf8_and_unreadable_files_are_scenario_errors(tmp_path):
    p = tmp_path / "latin.toml"
    p.write_bytes(to_toml(VALID).replace("fuzz base", "caf\xe9").encode("latin-1"))
    with pytest.raises(ScenarioError, match="not UTF-8"):
        load_scenario(p)
    with pytest.raises(ScenarioError, match="cannot read"):
        load_scenario(tmp_path)  # a folder
    with pytest.raises(ScenarioError, match="cannot read"):
        load_scenario(tmp_path / "missing.toml")


# regressions found by these fuzzers (each raised another exception type before)
@pytest.mark.parametrize("mutate,key", [
    (lambda d: d["run"].__setitem__("t_end", 10**400), "t_end"),  # OverflowError
    (lambda d: d["neuron"].__setitem__("tau_m", 10**400), "tau_m"),  # OverflowError
    (lambda d: d["input"].__setitem__("shape", ["pulse"]), "shape"),  # TypeError: unhashable
    (lambda d: d["neuron"].__setitem__("model", {"a": 1}), "model"),  # TypeError: unhashable
    (lambda d: d["neuron"].__setitem__("drift", "-u + ((2**64)**64)**64"), "drift"),  # ValueError (digits)
    (lambda d: d["neuron"].__setitem__("drift", "-u + " + "9" * 400), "drift"),  # OverflowError
    (lambda d: d["neuron"].__setitem__("drift", "-u + exp(1e300)"), "drift"),  # decimal error text
    (lambda d: d["scenario"].__setitem__("output", "a\x00b"), "output"),  # ValueError when writing
    (lambda d: d["scenario"].__setitem__("output", "."), "output"),  # --overwrite removed the scenario folder
    (lambda d: d["scenario"].__setitem__("output", "./"), "output"),
    (lambda d: d["run"].__setitem__("dt", 1e-300), "t_end"),  # tried to allocate 1e302 steps
    (lambda d: d["run"].__setitem__("record_interval", 0.0), "record_interval"),  # ValueError at run time
    (lambda d: d["run"].__setitem__("record_interval", 0.15), "record_interval"),
    (lambda d: d["run"].__setitem__("record_interval", 1.797693134862316e307), "record_interval"),  # OverflowError
])
def test_regressions_are_scenario_errors_naming_the_key(mutate, key):
    data = copy.deepcopy(VALID)
    mutate(data)
    with pytest.raises(ScenarioError, match=f"`{key}`"):
        parse_scenario(data, "fuzz.toml")


# ------------------------------------------------------------------ output folder rule
output_names = st.one_of(
    st.sampled_from(["..", "../out", "a/../../out", "/tmp/popdens-escape", ".", "./", "./.", "a/..",
                     "sub/../..", "~/../..", "\\..\\x", "out\n", "C:/x", "//x", "a/./../../b"]),
    st.lists(st.sampled_from(["..", ".", "a", "b", "", "/", "\\", "~"]), min_size=1, max_size=5).map("/".join),
    st.text(min_size=1, max_size=12),
)


def listing(folder: Path) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


@settings(max_examples=3 * N, **FUZZ)
@given(out=output_names)
def test_output_never_escapes_the_scenario_folder(out, tmp_path_factory):
    root = tmp_path_factory.mktemp("outer")
    inner = root / "inner"
    inner.mkdir()
    data = copy.deepcopy(VALID)
    data["scenario"]["output"] = out
    data["run"]["montecarlo_neurons"] = 0
    data["run"]["t_end"] = 2.0
    try:
        text = to_toml(data)
    except TypeError:
        return
    p = inner / "s.toml"
    p.write_text(text, encoding="utf-8")
    before_root = listing(root)
    code = main(["run", str(p), "--quiet", "--overwrite"])
    after = listing(root)
    new = after - before_root
    # nothing appears outside inner/, and nothing of inner/ (the scenario) is lost
    assert all(x.startswith("inner") for x in new), new
    assert (inner / "s.toml").exists()
    assert code in (0, 2)
    if code == 0:
        made = {x.split("/")[1] for x in new if x.count("/") >= 1}
        assert len(made) == 1 and not any(x.startswith(".") for x in made), made


def test_symlinked_output_outside_is_refused(tmp_path, capsys):
    outside = tmp_path / "elsewhere"
    outside.mkdir()
    inner = tmp_path / "inner"
    inner.mkdir()
    os.symlink(outside, inner / "out")
    data = copy.deepcopy(VALID)
    data["run"]["montecarlo_neurons"] = 0
    p = inner / "s.toml"
    p.write_text(to_toml(data), encoding="utf-8")
    assert main(["run", str(p), "--quiet", "--overwrite"]) == 2
    assert "outside the scenario's folder" in capsys.readouterr().err
    assert list(outside.iterdir()) == []


def test_overwrite_refuses_a_folder_that_is_not_an_output(tmp_path, capsys):
    data = copy.deepcopy(VALID)
    data["run"]["montecarlo_neurons"] = 0
    p = tmp_path / "s.toml"
    p.write_text(to_toml(data), encoding="utf-8")
    precious = tmp_path / "precious"
    precious.mkdir()
    (precious / "thesis.tex").write_text("keep me")
    # regression: --out <any folder> --overwrite used to delete that folder
    assert main(["run", str(p), "--out", str(precious), "--overwrite", "--quiet"]) == 2
    assert "not a popdens output folder" in capsys.readouterr().err
    assert (precious / "thesis.tex").read_text() == "keep me"
    assert main(["run", str(p), "--quiet"]) == 0
    assert main(["run", str(p), "--quiet", "--overwrite"]) == 0  # a popdens output may be replaced
    assert sorted(x.name for x in tmp_path.iterdir()) == ["out", "precious", "s.toml"]


# ------------------------------------------------------------------ special files, long names, deep keys
@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_a_fifo_scenario_or_trace_file_is_refused_without_hanging(tmp_path):
    fifo = tmp_path / "pipe.toml"
    os.mkfifo(fifo)  # nobody writes to it: a plain open() would block forever
    with pytest.raises(ScenarioError, match="FIFO"):
        load_scenario(fifo)
    os.mkfifo(tmp_path / "trace.csv")
    data = copy.deepcopy(VALID)
    data["input"] = {"shape": "trace", "file": "trace.csv"}
    with pytest.raises(ScenarioError, match=r"`file`.*FIFO"):
        parse_scenario(data, tmp_path / "s.toml")


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_a_trace_linked_to_a_device_is_refused(tmp_path):
    os.symlink("/dev/zero", tmp_path / "trace.csv")  # endless input: reading it used to fill the memory
    data = copy.deepcopy(VALID)
    data["input"] = {"shape": "trace", "file": "trace.csv"}
    with pytest.raises(ScenarioError, match=r"`file`.*a device"):
        parse_scenario(data, tmp_path / "s.toml")
    os.symlink("/dev/zero", tmp_path / "zero.toml")
    with pytest.raises(ScenarioError, match="a device"):
        load_scenario(tmp_path / "zero.toml")


@pytest.mark.parametrize("out", ["x" * 300, "a/" * 40 + "b", "é" * 150])
def test_a_long_output_name_is_exit_2_naming_the_key(out, tmp_path, capsys):
    data = copy.deepcopy(VALID)
    data["scenario"]["output"] = out
    data["run"]["montecarlo_neurons"] = 0
    p = tmp_path / "s.toml"
    p.write_text(to_toml(data), encoding="utf-8")
    assert main(["run", str(p), "--quiet"]) == 2  # regression: OSError "File name too long", exit 1
    err = capsys.readouterr().err
    assert "`output`" in err and "at most 200 bytes" in err and len(err) < 2000
    assert sorted(x.name for x in tmp_path.iterdir()) == ["s.toml"]


def test_a_long_out_flag_is_exit_2_naming_the_file_system_cause(tmp_path, capsys):
    data = copy.deepcopy(VALID)
    data["run"]["montecarlo_neurons"] = 0
    p = tmp_path / "s.toml"
    p.write_text(to_toml(data), encoding="utf-8")
    assert main(["run", str(p), "--quiet", "--out", str(tmp_path / ("y" * 300))]) == 2
    assert "too long" in capsys.readouterr().err  # strerror of ENAMETOOLONG


def test_a_5000_deep_dotted_key_is_exit_2(tmp_path, capsys):
    p = tmp_path / "deep.toml"
    p.write_text(to_toml(VALID) + "\n[extra]\n" + ".".join(["k"] * 5000) + " = 1\n", encoding="utf-8")
    assert main(["run", str(p), "--quiet"]) == 2  # regression: RecursionError traceback, exit 1
    err = capsys.readouterr().err
    assert "nested" in err and len(err) < 2000
    q = tmp_path / "sweep.toml"
    q.write_text(to_toml(VALID) + '\n[sweep]\n"' + "neuron." + ".".join(["k"] * 5000) + '" = [1.0]\n',
                 encoding="utf-8")
    assert main(["sweep", str(q), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "dotted key" in err and "5001 parts" in err and len(err) < 2000
