"""Bad input and faults: each reproduction a clear error (exit 2, naming what is wrong) or a
working result, never a traceback; and a hypothesis-driven fuzz of the command line."""

from __future__ import annotations

import tomllib

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from harness.cli.main import main
from harness.closedloop.report import mode_name

from .helpers import DEMO

BASE = DEMO.read_text()


def cli(*args):
    """(exit code, stderr text) of ``pfcrig ARGS`` run in this process."""
    import contextlib
    import io

    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        try:
            code = main([str(a) for a in args])
        except SystemExit as exc:  # argparse
            code = exc.code
    return code, err.getvalue()


def config_with(tmp_path, table, **kv):
    d = tomllib.loads(BASE)
    d.setdefault(table, {}).update(kv)
    lines = []
    for t, items in d.items():
        lines.append(f"[{t}]")
        lines += [f"{k} = {v!r}".replace("'", '"') for k, v in items.items()]
    p = tmp_path / "c.toml"
    p.write_text("\n".join(lines) + "\n")
    return p


@pytest.mark.parametrize(
    "table,kv,words",
    [
        ("protection", {"line_loss_time": 1.5}, "[protection] line_loss_time"),
        ("protection", {"retry_delay": 1e-6}, "[protection] retry_delay"),
        ("plant", {"dead_time": 9e-6}, "[plant] dead_time"),
        ("spec", {"vout": 1e300}, "[spec] vout"),
        ("spec", {"power": 5e-324}, "[spec] power"),
        ("spec", {"fsw": 5e6}, "[spec] fsw"),
        ("control", {"prefix": "_cffi"}, "[control] prefix"),
        ("control", {"prefix": "_"}, "[control] prefix"),
        ("control", {"prefix": "a__b"}, "[control] prefix"),
        ("control", {"prefix": "p" * 240}, "[control] prefix"),
    ],
)
def test_values_the_firmware_cannot_hold_are_refused(tmp_path, table, kv, words):
    code, err = cli("generate", config_with(tmp_path, table, **kv), "-o", tmp_path / "out")
    assert code == 2 and words in err and "Traceback" not in err, err
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize(
    "table,kv",
    [
        ("sensing", {"adc_bits": 16}),
        ("control", {"zc_ramp_periods": 0}),
        ("control", {"sync_delay_periods": 0}),
    ],
)
def test_edges_of_the_ranges_build_warning_free(tmp_path, table, kv):
    from codegen.build import compile_objects

    code, err = cli("generate", config_with(tmp_path, table, **kv), "-o", tmp_path / "out")
    assert code == 0, err
    assert compile_objects(tmp_path / "out", tmp_path / "obj")  # strict flags


@pytest.mark.parametrize(
    "args",
    [
        ["fuzz", DEMO, "--examples", "0"],
        ["fuzz", DEMO, "--examples", "-1"],
        ["fuzz", DEMO, "--batch", "0"],
        ["fuzz", DEMO, "--batch", "-1"],
        ["fuzz", DEMO, "--max-event-cycles", "-5"],
        ["fuzz", DEMO, "--workers", "30"],
        ["bench", "--sizes", "1,,2"],
        ["bench", "--sizes", "a"],
        ["bench", "--sizes", "0"],
        ["bench", "--sizes", "-1"],
        ["pil", DEMO, "--timeout", "0"],
        ["pil", DEMO, "--timeout", "-1"],
        ["pil", DEMO, "--timeout", "nan"],
        ["pil", DEMO, "--timeout", "inf"],
        ["run", DEMO, "--duration", "0"],
        ["run", DEMO, "--duration", "-1"],
        ["run", DEMO, "--duration", "nan"],
        ["run", DEMO, "--duration", "inf"],
        ["run", DEMO, "--duration", "1e-9"],
        ["run", DEMO, "--duration", "1e9"],
        ["run", DEMO, "--json", "no/such/dir/r.json"],
        ["run", DEMO, "--csv", "/"],
        ["init", DEMO],
        ["generate", DEMO, "-o", DEMO],
        ["generate", DEMO, "-o", ""],
    ],
)
def test_bad_arguments_exit_2_before_any_work(args):
    code, err = cli(*args)
    assert code == 2 and "Traceback" not in err and err.strip(), (args, err)


@pytest.mark.parametrize(
    "body,words",
    [
        (b"\xff\xfe not utf-8", "not UTF-8"),
        (b"a = " + b"[" * 5000 + b"]" * 5000, "nested too deeply"),
        (b"x" * (2 << 20), "larger than"),
    ],
)
def test_files_that_are_not_configs(tmp_path, body, words):
    p = tmp_path / "c.toml"
    p.write_bytes(body)
    code, err = cli("design", p)
    assert code == 2 and words in err, err


@pytest.mark.parametrize(
    "text,words",
    [
        ("duration = 0.1\ngrid = 5\n", "expected a table [grid]"),
        ("duration = 0.1\nevent = 5\n", "event = 5: expected a list"),
        ("duration = 0.1\n[grid]\nharmonics = 5\n", "expected a list"),
        ('duration = 0.1\n[[event]]\nt = 0.01\nkind = ["dip"]\n', "kind"),
        ("duration = 0.1\n[sensors]\nseed = 1.5\n", "whole number"),
        ("duration = 0.1\n[grid]\nharmonics = [[2.7, 0.01, 0.0]]\n", "whole number"),
        ('duration = 0.1\n[[event]]\nt = 0.5\nkind = "load"\npower = 1.0\n', "after the run's end"),
    ],
)
def test_scenario_tables_of_the_wrong_type(tmp_path, text, words):
    p = tmp_path / "s.toml"
    p.write_text(text)
    code, err = cli("run", DEMO, "--scenario", p, "--quiet")
    assert code == 2 and words in err and "Traceback" not in err, err


def test_zero_volt_line_reports_without_a_traceback(tmp_path):
    p = tmp_path / "s.toml"
    p.write_text("duration = 0.05\n[grid]\nvrms = 0.0\n[load]\npower = 100.0\n")
    code, err = cli("run", DEMO, "--scenario", p, "--quiet", "--json", tmp_path / "r.json")
    assert code == 0 and "Traceback" not in err, err
    assert '"steady": false' in (tmp_path / "r.json").read_text()


def test_an_unknown_mode_from_a_target_is_named_not_a_crash():
    assert mode_name(9) == "unknown_9" and mode_name(3) == "run"


def test_generating_again_removes_files_of_the_earlier_generation(tmp_path):
    assert cli("generate", DEMO, "-o", tmp_path / "c", "--with-link")[0] == 0
    assert (tmp_path / "c" / "pfc_link.c").exists()
    assert cli("generate", DEMO, "-o", tmp_path / "c")[0] == 0
    assert not (tmp_path / "c" / "pfc_link.c").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no staging left


def test_renaming_the_config_changes_no_generated_byte(tmp_path):
    other = tmp_path / "renamed.toml"
    other.write_text(BASE)
    assert cli("generate", DEMO, "-o", tmp_path / "a")[0] == 0
    assert cli("generate", other, "-o", tmp_path / "b")[0] == 0
    for f in (tmp_path / "a").iterdir():
        assert f.read_bytes() == (tmp_path / "b" / f.name).read_bytes(), f.name


def test_a_failed_write_leaves_the_earlier_report(tmp_path, monkeypatch):
    """The JSON goes through a temporary file: a write that fails half-way leaves the good
    report of an earlier run, and no temporary."""
    from harness.cli import output

    out = tmp_path / "r.json"
    output.write_json(str(out), {"a": 1})
    good = out.read_text()

    def broken(obj, fh=None):
        fh.write('{"half": ')
        raise OSError(27, "File too large")

    monkeypatch.setattr(output, "dump_json", broken)
    with pytest.raises(OSError):
        output.write_json(str(out), {"b": 2})
    assert out.read_text() == good
    assert [p.name for p in tmp_path.iterdir()] == ["r.json"]


OPTIONS = [
    "--json",
    "--csv",
    "--plot",
    "--duration",
    "--scenario",
    "--model",
    "-o",
    "--examples",
    "--seed",
    "--workers",
    "--batch",
    "--sizes",
    "--timeout",
    "--db",
    "--vrms",
    "--load",
    "--freq",
]
VALUES = [
    "0",
    "-1",
    "nan",
    "inf",
    "1e-9",
    "abc",
    "",
    "/",
    "0.002",
    "1,,2",
    "switching",
    "no/such/file",
    "1e400",
]


@settings(
    max_examples=60,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture],
)
@given(
    cmd=st.sampled_from(
        ["design", "generate", "run", "fuzz", "pil", "bench", "init", "sweep", "results"]
    ),
    opts=st.lists(st.tuples(st.sampled_from(OPTIONS), st.sampled_from(VALUES)), max_size=3),
    content=st.one_of(
        st.just(BASE),
        st.binary(max_size=200).map(lambda b: b.decode("latin-1")),
        st.text(max_size=200),
    ),
)
def test_command_line_fuzz(tmp_path, monkeypatch, cmd, opts, content):
    """Random argument lists and file contents: exit 0, 1, 2 or 130, never a traceback."""
    monkeypatch.chdir(tmp_path)  # relative output folders ("nan", "abc") land there
    cfg = tmp_path / "f.toml"
    cfg.write_text(content)
    args = [cmd] if cmd == "bench" else [cmd, cfg]
    for k, v in opts:
        args += [k, v]
    if cmd == "bench" or (cmd in ("run", "fuzz", "pil", "sweep") and content == BASE):
        args = ["design", cfg]  # a long measurement or campaign is not what this test is for
    code, err = cli(*args)
    assert code in (0, 1, 2, 130) and "Traceback" not in err, (args, code, err)


SCALARS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(-(10**6), 10**6),
    st.text(max_size=5),
    st.booleans(),
    st.lists(st.integers(0, 3), max_size=4),
)


def scenario_dicts():
    """Scenario tables near and far from valid: known keys with any values, some of the
    wrong type, events of every kind."""
    event = st.fixed_dictionaries(
        {
            "t": st.one_of(st.floats(0.0, 0.009), SCALARS),
            "kind": st.one_of(
                st.sampled_from(["dip", "load", "freq", "phase_jump", "vrms"]), SCALARS
            ),
        },
        optional={
            "residual": SCALARS,
            "cycles": SCALARS,
            "power": SCALARS,
            "hz": SCALARS,
            "deg": SCALARS,
            "vrms": SCALARS,
        },
    )
    return st.fixed_dictionaries(
        {"duration": st.one_of(st.floats(1e-4, 0.01), SCALARS)},
        optional={
            "grid": st.one_of(
                st.fixed_dictionaries(
                    {},
                    optional={
                        "vrms": st.one_of(st.floats(0, 300), SCALARS),
                        "freq": SCALARS,
                        "phase_deg": SCALARS,
                        "dc": SCALARS,
                        "harmonics": st.one_of(SCALARS, st.lists(st.lists(SCALARS, max_size=4))),
                    },
                ),
                SCALARS,
            ),
            "load": st.one_of(
                st.fixed_dictionaries(
                    {},
                    optional={
                        "kind": st.one_of(
                            st.sampled_from(["resistive", "constant_power"]), SCALARS
                        ),
                        "power": SCALARS,
                    },
                ),
                SCALARS,
            ),
            "sensors": st.fixed_dictionaries(
                {}, optional={"seed": SCALARS, "noise_counts": SCALARS}
            ),
            "event": st.one_of(st.lists(event, max_size=3), SCALARS),
        },
    )


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(d=scenario_dicts())
def test_any_scenario_is_refused_clearly_or_runs(d):
    """Scenario files across their schema: refused with a ConfigError naming the file, or
    run (durations here are at most 10 ms)."""
    from design.config import ConfigError
    from design.project import load_project
    from harness.closedloop.loop import run
    from harness.closedloop.report import lane_report
    from harness.closedloop.scenario import from_dict

    try:
        scn = from_dict(d, "s.toml")
    except ConfigError as exc:
        assert str(exc).startswith("s.toml"), str(exc)
        return
    if scn.duration_s > 0.01:  # the command line's limits decide about long runs
        from harness.cli.checks import UsageError, run_length
        from harness.closedloop.loop import RECORD_BYTES_PER_PERIOD

        if scn.duration_s > 60.0:
            with pytest.raises(UsageError):
                run_length(scn.duration_s, 65000.0, 1, RECORD_BYTES_PER_PERIOD)
        return
    prj = load_project(DEMO)
    rep = lane_report(run(prj, [scn], progress=False))
    assert rep["steady"] is False  # 10 ms is never a steady window
