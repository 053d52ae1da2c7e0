"""Property test: whatever the input, the command line ends cleanly and touches nothing
outside its output folder.

Random bytes, random tables that look like observation files, and random configs are
written into a fresh folder; ``massfit fit`` runs on them (in this process for speed,
and a few times as a real process). Every run must end with an exit status massfit
documents (0 converged, 2 bad input, 3 not converged, 4 a poor fit), print no
traceback, and leave every file outside the output folder as it was (checksums of the
whole folder before and after).
"""

import contextlib
import hashlib
import io
import math
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from conftest import write_one_companion
from massfit.cli.commands import main

ALLOWED = {0, 2, 3, 4}
QUICK = ("--no-plots", "--quiet", "--max-steps", "100", "--check-every", "50",
         "--walkers", "16", "--seed", "1")
PROPERTY = settings(max_examples=12, deadline=None, derandomize=True, database=None,
                    suppress_health_check=list(HealthCheck))

COLUMNS = ["time", "body", "east", "north", "east_err", "north_err", "corr", "sep", "pa",
           "sep_err", "pa_err", "distance", "rv", "rv_err", "instrument", "extra"]
CELLS = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10**20, 10**20).map(str),
    st.sampled_from(["", "Wren", "primary", "2460000.5", "1e300", "-1e300", "1e-320",
                     "nan", "2025-01-01T00:00:00", "a/b", "\"quoted, cell\"", "\t", "#"]),
    st.text(alphabet=st.characters(blacklist_categories=("Cs",),
                                   blacklist_characters="\r\n\x00"), max_size=8))


def tree_digest(folder: Path, skip: Path) -> dict:
    """SHA-256 of every file (and the target of every link) under ``folder``."""
    digest = {}
    for root, dirs, files in os.walk(folder):
        root = Path(root)
        dirs[:] = [d for d in dirs if root / d != skip]
        for name in files + [d for d in dirs if (root / d).is_symlink()]:
            path = root / name
            if path.is_symlink():
                digest[str(path)] = "link:" + os.readlink(path)
            else:
                digest[str(path)] = hashlib.sha256(path.read_bytes()).hexdigest()
    return digest


def run_in_process(args, cwd):
    err = io.StringIO()
    previous = os.getcwd()
    os.chdir(cwd)
    try:
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            try:
                status = main([str(a) for a in args])
            except SystemExit as exc:  # argparse's own refusals
                status = exc.code
    finally:
        os.chdir(previous)
    return status, err.getvalue()


def check_run(files: dict, args, *, real_process=False):
    """Write ``files`` into a fresh folder, run massfit there and check the property."""
    with tempfile.TemporaryDirectory() as tmp:
        ws = Path(tmp) / "ws"
        ws.mkdir()
        (Path(tmp) / "outside.csv").write_text("time,body\n1,x\n")
        for name, content in files.items():
            path = ws / name
            if isinstance(content, bytes):
                path.write_bytes(content)
            else:
                path.write_text(content)
        out = ws / "out"
        before = tree_digest(Path(tmp), skip=out)
        argv = [*args, "--out", "out", *QUICK]
        if real_process:
            proc = subprocess.run([sys.executable, "-m", "massfit", *argv], cwd=ws,
                                  capture_output=True, text=True, timeout=600,
                                  env={**os.environ, "MPLBACKEND": "Agg"})
            status, stderr = proc.returncode, proc.stderr
        else:
            status, stderr = run_in_process(argv, ws)
        after = tree_digest(Path(tmp), skip=out)
    assert status in ALLOWED, (status, stderr)
    assert "Traceback" not in stderr, stderr
    if status == 2:
        errors = [line for line in stderr.splitlines() if line.startswith("massfit: error:")]
        assert len(errors) == 1, stderr
    assert before == after, "a file outside the output folder was changed"


# ------------------------------------------------------------------ strategies
KINDS = [["time", "body", "east", "north", "east_err", "north_err"],
         ["time", "body", "sep", "pa", "sep_err", "pa_err"],
         ["time", "body", "rv", "rv_err"]]
PLAUSIBLE = {
    "time": st.floats(2459000.0, 2462000.0).map(repr),
    "body": st.sampled_from(["Wren", "Wren", "Wren", "Ash", "primary", "a/b"]),
    "corr": st.floats(-0.99, 0.99).map(repr),
    "instrument": st.sampled_from(["", "A", "B"]),
}


@st.composite
def tables(draw):
    """A CSV or ECSV table whose header and cells look like observations: usually one
    kind's full set of columns with plausible values, with some cells made bad."""
    names = list(draw(st.sampled_from(KINDS)))
    names += draw(st.lists(st.sampled_from(COLUMNS), max_size=2, unique=True))
    names = list(dict.fromkeys(draw(st.permutations(names))))
    if draw(st.integers(0, 4)) == 0:
        names = names[:draw(st.integers(1, len(names)))]  # a column or more lost
    garbage = draw(st.sampled_from([0.0, 0.0, 0.02, 0.1, 0.3]))

    def cell(name):
        if draw(st.floats(0.0, 1.0)) < garbage:
            return draw(CELLS)
        plausible = PLAUSIBLE.get(name, st.floats(0.01, 500.0).map(repr))
        return draw(plausible)

    count = draw(st.integers(0, 12)) if draw(st.integers(0, 5)) == 0 else 10
    rows = [[cell(n) for n in names] for _ in range(count)]
    lines = [",".join(names)] + [",".join(row) for row in rows]
    if draw(st.booleans()):
        units = {"east": "mas", "north": "mas", "east_err": "mas", "north_err": "mas",
                 "sep": "mas", "sep_err": "mas", "pa": "deg", "pa_err": "deg",
                 "rv": "km / s", "rv_err": "km / s", "distance": "pc"}
        header = ["# %ECSV 1.0", "# ---", "# delimiter: ','", "# datatype:"]
        header += [f"# - {{name: {n}, datatype: string}}" if n in ("time", "body",
                   "instrument") or n not in units else
                   f"# - {{name: {n}, unit: {units[n]}, datatype: float64}}" for n in names]
        header += ["# meta: {time_format: jd, time_scale: tdb}", "# schema: astropy-2.0"]
        return "obs.ecsv", "\n".join(header + lines) + "\n"
    return "obs.csv", "\n".join(lines) + "\n"


UNITS_OPTION = ("--units", "east=mas,north=mas,east_err=mas,north_err=mas,sep=mas,"
                           "sep_err=mas,pa=deg,pa_err=deg,rv=km/s,rv_err=km/s")
OPTIONS = st.lists(st.sampled_from([UNITS_OPTION, UNITS_OPTION, ("--parallax", "25 mas"),
    ("--time-format", "jd"), ("--time-format", "isot"), ("--time-scale", "utc"),
    ("--time-scale", "tdb"), ("--units", "east=mas,north=mas,east_err=mas,north_err=mas"),
    ("--units", "east=mas,east=deg"), ("--units", "nothing=km"), ("--parallax", "25 mas"),
    ("--parallax", "41.3 km"), ("--parallax-err", "0.3 mas"), ("--distance", "-3 pc"),
    ("--skip-bad-rows",), ("--primary", "Wren")]), max_size=5, unique=True)


def _toml_value(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value) if value == value and abs(value) != float("inf") else "nan"
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k} = {_toml_value(v)}" for k, v in value.items()) + "}"
    return '"' + str(value).replace("\\", "\\\\").replace('"', '\\"') + '"'


@st.composite
def configs(draw):
    """A TOML config of random keys and values from the config's own vocabulary."""
    files = draw(st.sampled_from([["obs.csv"], ["obs.csv"], ["obs.csv"], ["../outside.csv"],
                                  ["missing.csv"], ["obs.csv", "obs.csv"], [], ["."],
                                  "obs.csv"]))
    sections = {"data": {"files": files}}
    if draw(st.integers(0, 3)):
        sections["data"].update(time_format="jd", time_scale=draw(st.sampled_from(
            ["tdb", "utc", "local", "none"])), units={"east": "mas", "north": "mas",
                                                     "east_err": "mas", "north_err": "mas"})
    odd = st.one_of(st.integers(-10, 10**6), st.floats(allow_nan=False), st.booleans(),
                    st.sampled_from(["", "x"]))
    quantity = st.sampled_from(["25 mas", "0.3 mas", "41.3 km", "1e308 mas", "-2 mas",
                                "40 pc", "nan mas"])
    typed = {"parallax": quantity, "parallax_err": quantity, "distance": quantity,
             "primary": st.sampled_from(["primary", "Wren"]), "light_time": st.booleans(),
             "walkers": st.integers(-2, 40), "max_steps": st.integers(0, 150),
             "check_every": st.integers(0, 80), "seed": st.integers(-10, 10**12),
             "model": st.sampled_from(["keplerian", "oblate", "n-body", "other"]),
             "j2": st.floats(-1, 1), "rtol": st.floats(0, 1)}
    for section, keys in (("system", ["parallax", "parallax_err", "distance", "primary",
                                      "light_time", "colour"]),
                          ("sampler", ["walkers", "max_steps", "check_every", "seed",
                                       "speed"]),
                          ("dynamics", ["model", "j2", "rtol"])):
        chosen = draw(st.lists(st.sampled_from(keys), max_size=3, unique=True))
        if chosen:
            sections[section] = {k: draw(typed.get(k, odd) if draw(st.integers(0, 5))
                                         else odd) for k in chosen}
    if draw(st.booleans()):
        sections["companions.C"] = {"period_prior": {"kind": draw(st.sampled_from(
            ["log-uniform", "uniform", "normal", "banana"])), "low": "1 d", "high": "0 d"}}
    text = "\n".join(f"[{name}]\n" + "\n".join(f"{k} = {_toml_value(v)}"
                                               for k, v in body.items())
                     for name, body in sections.items())
    return text + "\n"


# A clean circular orbit (P = 118 d, 100 mas, seen at 53 deg) over two periods.
GOOD_ROWS = "time,body,east,north,east_err,north_err\n" + "".join(
    f"{2460000.5 + 17 * k},Wren,{100 * math.cos(2 * math.pi * 17 * k / 118):.4f},"
    f"{60 * math.sin(2 * math.pi * 17 * k / 118):.4f},0.5,0.5\n" for k in range(14))


# ------------------------------------------------------------------ the properties
@PROPERTY
@given(content=st.binary(max_size=400), name=st.sampled_from(["obs.csv", "obs.ecsv",
                                                               "obs.toml", "obs"]))
def test_random_bytes(content, name):
    check_run({name: content}, ["fit", name])


@PROPERTY
@given(table=tables(), options=OPTIONS)
def test_random_tables(table, options):
    name, text = table
    given = [part for option in options for part in option]
    if "--units" not in given:
        given += UNITS_OPTION
    if "--parallax" not in given:
        given += ["--parallax", "25 mas"]
    check_run({name: text}, ["fit", name, "--time-format", "jd", "--time-scale", "tdb",
                             *given])


@PROPERTY
@given(config=configs())
def test_random_configs(config):
    check_run({"system.toml": config, "obs.csv": GOOD_ROWS}, ["fit", "system.toml"])


@pytest.mark.slow  # a real process per table: 8 s
@settings(max_examples=2, deadline=None, derandomize=True, database=None,
          suppress_health_check=list(HealthCheck))
@given(table=tables())
def test_random_tables_in_a_real_process(table):
    name, text = table
    check_run({name: text}, ["fit", name, "--time-format", "jd", "--time-scale", "tdb"],
              real_process=True)


def test_a_good_table_writes_only_its_output_folder(tmp_path):
    # The same property on a table that reaches the sampler (exit 0 or 3): one invented
    # companion over about two orbits, offsets in au (no distance needed).
    path = write_one_companion(tmp_path)
    check_run({"obs.ecsv": path.read_text()}, ["fit", "obs.ecsv"])
