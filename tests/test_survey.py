"""lidmelt survey: sites table, failures, executors (local and Dask), resume, --force."""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import emcee
import numpy as np
import pandas as pd
import pytest

from lidmelt.cli import main
from lidmelt.inversion import InputError
from lidmelt.inversion.survey import read_sites, survey

from survey_helpers import check_survey_nc, truth_table, write_sites, write_study

_SITES = "site,position_km,thickness_km,thickness_sigma_km,pressure_gpa,pressure_sigma_gpa\n"


@pytest.fixture(scope="session")
def dask_cluster():
    distributed = pytest.importorskip("distributed")
    saved = os.environ.get("OMP_NUM_THREADS")
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                       dashboard_address=None, host="127.0.0.1")
    yield cluster
    cluster.close()
    if saved is None:  # LocalCluster leaves OMP_NUM_THREADS=1 behind in this process
        os.environ.pop("OMP_NUM_THREADS", None)
    else:
        os.environ["OMP_NUM_THREADS"] = saved


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("survey")
    study = write_study(folder)
    sites = write_sites(folder, study, truth_table(1390.0, [18.0, 30.0, 42.0, 26.0]), 4)
    return folder, study, sites


def _summary_text(folder: Path) -> str:
    return (folder / "sites_summary.csv").read_text(encoding="utf-8")


def test_same_numbers_on_one_and_two_workers_and_on_dask(inputs, dask_cluster, tmp_path):
    _, study, sites = inputs
    one = survey(study, sites, out=tmp_path / "one", workers=1, quiet=True)
    two = survey(study, sites, out=tmp_path / "two", workers=2, quiet=True)
    on_dask = survey(study, sites, out=tmp_path / "dask",
                     scheduler=dask_cluster.scheduler_address, quiet=True)
    assert _summary_text(tmp_path / "one") == _summary_text(tmp_path / "two")
    assert _summary_text(tmp_path / "one") == _summary_text(tmp_path / "dask")
    for a, b in zip(one.records, on_dask.records, strict=True):  # full precision too
        assert a["rows"] == b["rows"] and a["seed"] == b["seed"]
    assert one.records[0]["seed"] != one.records[1]["seed"]
    # [sampler] seed 11; stream "survey_site" has spawn key 9 (DEVELOPERS.md), site 2
    expected = np.random.SeedSequence(11, spawn_key=(9, 2)).generate_state(1)[0]
    assert one.records[2]["seed"] == int(expected)
    assert two.summary["method"].eq("grid").all()


def test_mcmc_sites_match_between_local_and_dask(tmp_path, dask_cluster):
    # four free parameters: each site is fitted by emcee with its own seed
    study = write_study(tmp_path, extra_parameters=(
        'solidus_offset = { prior = "normal", mean = 0.0, sd = 15.0 }\n'
        'active_upwelling = { prior = "uniform", min = 1.0, max = 2.0 }'),
        extra_sampler="walkers = 16\ness_target = 100\ntau_multiple = 5\nmax_steps = 300\n"
        "check_interval = 100")
    truth = truth_table(1400.0, [25.0, 40.0]).assign(solidus_offset=0.0,
                                                     active_upwelling=1.0)
    sites = write_sites(tmp_path, study, truth, 2)
    local = survey(study, sites, out=tmp_path / "local", workers=2, quiet=True,
                   keep_chains=True)
    survey(study, sites, out=tmp_path / "remote",
           scheduler=dask_cluster.scheduler_address, quiet=True)
    assert local.summary["method"].eq("mcmc").all()
    chain = emcee.backends.HDFBackend(next((tmp_path / "local" / "sites").glob(
        "0001-*/chain.h5")), read_only=True)  # --keep-chains: emcee reads it
    assert chain.get_chain().shape[1:] == (16, 4)
    assert _summary_text(tmp_path / "local") == _summary_text(tmp_path / "remote")
    # survey.nc: emcee sites are resampled too; same bytes from both executors
    assert (tmp_path / "local" / "survey.nc").read_bytes() == (
        tmp_path / "remote" / "survey.nc").read_bytes()
    check_survey_nc(tmp_path / "local", local)


def test_a_site_with_bad_data_fails_alone(tmp_path, capsys):
    study = write_study(tmp_path)
    sites = tmp_path / "sites.csv"
    sites.write_text(_SITES + "A,0,6.1,0.5,,\nB,10,5.2,-0.4,,\nC,20,4.8,0.5,1.1,0.1\n"
                     "D,30,0.5,0.5,0.9,\n", encoding="utf-8")
    code = main(["survey", str(study), "--sites", str(sites), "--out",
                 str(tmp_path / "out"), "--workers", "1", "--quiet"])
    assert code == 0
    summary = pd.read_csv(tmp_path / "out" / "sites_summary.csv")
    status = summary.groupby("site", sort=False)["status"].first()
    assert status["A"] == "ok" and status["C"] == "ok"
    assert status["B"].startswith("failed:")
    assert "sites.csv, line 3, column 'thickness_sigma_km'" in status["B"]  # header is line 1
    assert "must be >= 0.001" in status["B"]
    assert "line 5, column 'pressure_sigma_gpa'" in status["D"]  # half of a pair
    assert summary[summary["site"] == "B"]["median"].isna().all()
    report = (tmp_path / "out" / "report.md").read_text(encoding="utf-8")
    assert "**B** (line 3)" in report and "no basis on their own" in report
    assert "fitted with the igneous crust made from the melt" in report
    assert "site 'B'" in capsys.readouterr().err


def test_a_site_that_cannot_melt_fails_with_the_reason(tmp_path):
    # Tp <= 1270 degC under a lid >= 90 km: no melt anywhere in the priors (melting
    # starts near 50-60 km at such Tp, McKenzie & Bickle 1988; value from memory), yet
    # the site records 6 km of crust; a site with no crust is explained by no melt
    cold = write_study(tmp_path)
    cold.write_text(cold.read_text().replace("max = 1600.0", "max = 1270.0").replace(
        "min = 5.0", "min = 90.0"))
    sites = tmp_path / "sites.csv"
    sites.write_text("site,thickness_km,thickness_sigma_km\ncold,6,0.5\nnone,0,0.5\n",
                     encoding="utf-8")
    result = survey(cold, sites, out=tmp_path / "cold", workers=1, quiet=True,
                    keep_chains=True)
    assert result.records[0]["status"].startswith("failed: no melt possible")
    assert "6 km of crust" in result.records[0]["status"]
    assert result.records[1]["status"] == "ok"  # no crust observed: no melt is the answer
    assert result.records[1]["melt_share"] == 0.0
    grid = np.load(next((tmp_path / "cold" / "sites").glob("0002-*/grid.npz")))
    assert grid["log_likelihood"].shape == (grid["axis_potential_temperature"].size,
                                            grid["axis_lithosphere_thickness"].size)


@pytest.mark.parametrize("content, needle", [
    ("site,thickness_km\nA,6\n", "missing column 'thickness_sigma_km'"),
    ("site,thickness_km,thickness_sigma_km,pressure_gpa\nA,6,0.5,1\n",
     "missing column 'pressure_sigma_gpa', needed together with pressure_gpa"),
    ("site,thickness_km,thickness_sigma_km\nA,6,0.5\nA,5,0.5\n", "line 3, column 'site': site 'A' "
     "appears twice"),
])
def test_a_broken_sites_file_stops_with_exit_2(tmp_path, capsys, content, needle):
    study = write_study(tmp_path)
    sites = tmp_path / "sites.csv"
    sites.write_text(content, encoding="utf-8")
    code = main(["survey", str(study), "--sites", str(sites), "--out",
                 str(tmp_path / "out"), "--quiet"])
    assert code == 2
    err = capsys.readouterr().err
    assert needle in err and err.count("\n") == 1
    assert not (tmp_path / "out").exists()


def test_pressures_need_an_equilibration(tmp_path, capsys):
    study = write_study(tmp_path)
    study.write_text(study.read_text().replace('equilibration = "top"', ""))
    sites = tmp_path / "sites.csv"
    sites.write_text(_SITES + "A,0,6.1,0.5,1.0,0.1\n", encoding="utf-8")
    assert main(["survey", str(study), "--sites", str(sites), "--out",
                 str(tmp_path / "out")]) == 2
    assert "key 'survey.equilibration'" in capsys.readouterr().err


def test_a_misspelt_survey_key_is_named_with_its_line(tmp_path, capsys):
    study = write_study(tmp_path, extra_survey="tp_sprad = 3")
    sites = tmp_path / "sites.csv"
    sites.write_text("site,thickness_km,thickness_sigma_km\nA,6,0.5\n", encoding="utf-8")
    assert main(["survey", str(study), "--sites", str(sites), "--out",
                 str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert "line 14" in err and "survey.tp_sprad" in err and "did you mean 'tp_spread'" in err


def _finished(folder: Path) -> int:
    return len(list((folder / "sites").glob("*/site.json"))) if folder.exists() else 0


def test_resume_after_a_survey_killed_halfway(inputs, tmp_path):
    folder, study, _ = inputs
    many = write_sites(tmp_path, study, truth_table(1390.0, np.linspace(15, 45, 8)), 9)
    out = tmp_path / "killed"
    command = [sys.executable, "-m", "lidmelt.cli", "survey", str(study),
               "--sites", str(many), "--out", str(out), "--workers", "1", "--quiet"]
    child = subprocess.Popen(command, start_new_session=True, stdout=subprocess.DEVNULL,
                             stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 120
        while _finished(out) < 3 and time.monotonic() < deadline and child.poll() is None:
            time.sleep(0.05)
    finally:
        os.killpg(child.pid, signal.SIGKILL)  # the command, its workers, nothing else
        child.wait()
    done = _finished(out)
    assert 3 <= done < 8, "the survey was not killed halfway"
    assert not (out / "sites_summary.csv").exists()
    resumed = survey(study, many, out=out, workers=1, resume=True, quiet=True)
    survey(study, many, out=tmp_path / "fresh", workers=2, quiet=True)
    assert _summary_text(out) == _summary_text(tmp_path / "fresh")
    assert len(resumed.records) == 8 and not resumed.failed


def test_resume_refuses_changed_inputs_and_force_guards_foreign_folders(inputs, tmp_path,
                                                                       capsys):
    _, study, sites = inputs
    out = tmp_path / "run"
    survey(study, sites, out=out, workers=1, quiet=True)
    changed = tmp_path / "changed.csv"
    changed.write_text(sites.read_text().replace("S01", "S1x"), encoding="utf-8")
    args = ["survey", str(study), "--out", str(out), "--quiet", "--workers", "1"]
    assert main([*args, "--sites", str(changed), "--resume"]) == 2
    assert "the sites file changed" in capsys.readouterr().err
    assert main([*args, "--sites", str(sites), "--resume", "--seed", "5"]) == 2
    assert "the settings" in capsys.readouterr().err
    assert main([*args, "--sites", str(sites)]) == 2  # exists, no --resume/--force
    (out / "notes.txt").write_text("mine", encoding="utf-8")
    assert main([*args, "--sites", str(sites), "--force"]) == 2
    assert "did not write" in capsys.readouterr().err
    assert (out / "notes.txt").read_text() == "mine"
    (out / "notes.txt").unlink()
    assert main([*args, "--sites", str(sites), "--force", "--seed", "5"]) == 0
    assert json.loads((out / "survey.json").read_text())["settings"]["seed"] == 5
    plain = tmp_path / "plain"
    plain.mkdir()
    (plain / "data.csv").write_text("x", encoding="utf-8")
    assert main(["survey", str(study), "--sites", str(sites), "--out", str(plain),
                 "--force", "--quiet"]) == 2
    assert (plain / "data.csv").exists()


def test_sites_table_reads_optional_columns(tmp_path):
    path = tmp_path / "s.csv"
    path.write_text("# invented sites\nsite,thickness_km,thickness_sigma_km,note\nA,6,0.5,x\n",
                    encoding="utf-8")
    table = read_sites(path)
    assert not table.has_positions and not table.has_pressures
    assert table.sites[0].line == 3 and table.sites[0].thickness_km == 6.0


def test_sites_table_refuses_an_unknown_column_and_an_old_name(tmp_path):
    path = tmp_path / "s.csv"
    path.write_text("site,thickness_km,thickness_sigma_km,pressure_gpa,pressure_sigma\n"
                    "A,6,0.5,1,0.2\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"s.csv, line 1, column 'pressure_sigma': unknown "
                       r"column 'pressure_sigma'; did you mean 'pressure_sigma_gpa'\?"):
        read_sites(path)
    path.write_text("site,thickness_km,sigma_km\nA,6,0.5\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"column 'sigma_km' is now called "
                       r"'thickness_sigma_km'"):
        read_sites(path)


def test_sites_table_applies_the_crust_limit_of_the_crust_kind(tmp_path):
    # The sites file takes the crust kind's rules: 75 km fails that site at read time,
    # naming the file and line, instead of failing later in a worker without them.
    path = tmp_path / "s.csv"
    path.write_text("site,thickness_km,thickness_sigma_km\nA,6,0.5\nB,75,1\n",
                    encoding="utf-8")
    table = read_sites(path)
    assert table.sites[0].error is None
    assert table.sites[1].error.startswith(f"{path}, line 3, column 'thickness_km': value "
                                           "75 must be between 0 and 60 km")


def test_import_lidmelt_stays_light():
    code = ("import sys, lidmelt; light = not any(m in sys.modules for m in "
            "('lidmelt.inversion.survey', 'distributed', 'dask')); "
            "f = lidmelt.survey; print(light, f.__name__, 'distributed' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out == ["True", "survey", "False"]


def _closed_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture()
def web_server():
    import http.server
    import threading

    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0),
                                             http.server.SimpleHTTPRequestHandler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"tcp://127.0.0.1:{server.server_address[1]}"
    server.shutdown()
    server.server_close()


@pytest.mark.parametrize("which, needle", [
    ("web", "not a Dask scheduler"),
    ("notanaddress", "is not a scheduler address"),
    ("closed", "cannot connect"),
])
def test_a_wrong_scheduler_fails_at_once_with_one_line(inputs, tmp_path, capsys, web_server,
                                                       which, needle):
    _, study, sites = inputs
    address = {"web": web_server, "notanaddress": "notanaddress",
               "closed": f"tcp://127.0.0.1:{_closed_port()}"}[which]
    out = tmp_path / "out"
    code = main(["survey", str(study), "--sites", str(sites), "--out", str(out),
                 "--scheduler", address, "--quiet"])
    err = capsys.readouterr().err
    assert code == 2
    assert needle in err and address in err and "tcp://host:8786" in err
    assert err.count("\n") == 1  # one line, no traceback
    assert not out.exists()


def test_a_scheduler_address_without_scheme_is_accepted(dask_cluster):
    from lidmelt.inversion.survey.executors import check_scheduler

    bare = dask_cluster.scheduler_address.split("://")[1]
    assert check_scheduler(bare) == dask_cluster.scheduler_address


def test_row_messages_name_the_file_and_the_real_line(tmp_path):
    sites = tmp_path / "sites.csv"
    sites.write_text("# invented\nsite,thickness_km,thickness_sigma_km\nA,6,0.5\nB,70,0.5\n"
                     "C,6,1e-300\n", encoding="utf-8")
    table = read_sites(sites)
    assert table.sites[0].error is None
    # the crust rule of the observation tables (0-60 km), on the file's own line 5
    assert str(sites) + ", line 4, column 'thickness_km'" in table.sites[1].error
    assert "between 0 and 60" in table.sites[1].error
    assert str(sites) + ", line 5, column 'thickness_sigma_km'" in table.sites[2].error
    assert "no measurement error" in table.sites[2].error


@pytest.mark.parametrize("name", ["nan", "NA", "null"])
def test_a_site_name_read_as_missing_is_refused(tmp_path, name):
    from lidmelt.inversion.errors import InputError

    sites = tmp_path / "sites.csv"
    sites.write_text(f"site,thickness_km,thickness_sigma_km\nA,6,0.5\n{name},5,0.5\n",
                     encoding="utf-8")
    with pytest.raises(InputError, match="line 3, column 'site': site name"):
        read_sites(sites)


def test_pt_correlation_reaches_the_pressure_block(tmp_path):
    from lidmelt.inversion.survey import SurveySettings
    from lidmelt.inversion.survey.sites import site_observations

    sites = tmp_path / "sites.csv"
    sites.write_text("site,thickness_km,thickness_sigma_km,pressure_gpa,pressure_sigma_gpa,"
                     "temperature_c,temperature_sigma_c,pt_correlation\n"
                     "A,6,0.5,1.2,0.1,1350,30,0.6\nB,6,0.5,1.2,0.1,,,0.6\n"
                     "C,6,0.5,1.2,0.1,1350,30,\n", encoding="utf-8")
    table = read_sites(sites)
    block = site_observations(table.sites[0], SurveySettings(equilibration="top"))[1]
    assert block.has_correlation and float(block.pt_correlation[0]) == 0.6
    assert "pt_correlation" in table.sites[1].error  # no temperature beside it
    assert table.sites[2].error is None and table.sites[2].pt_correlation is None


def test_fast_row_checks_give_the_row_by_row_answers(tmp_path):
    # every row through the vectorised path must equal the row-by-row rules
    from lidmelt.inversion.survey.sites import _GROUPS, _site

    sites = tmp_path / "sites.csv"
    cells = ["6", "0", "-1", "61", "x", "", "1e-4", "0.5", "nan", "inf", "1.1"]
    lines = ["site,thickness_km,thickness_sigma_km,pressure_gpa,pressure_sigma_gpa,position_km"]
    for k, (a, b, c) in enumerate(zip(cells, reversed(cells), cells[3:] + cells[:3])):
        lines.append(f"S{k},{a},{b},{c},{b},{a}")
    sites.write_text("\n".join(lines) + "\n", encoding="utf-8")
    table = read_sites(sites)
    header = lines[0].split(",")
    for k, site in enumerate(table.sites):
        slow = _site(k, dict(zip(header, lines[k + 1].split(","), strict=True)), k + 2,
                     _GROUPS[:2], sites)
        assert site == slow


def test_a_survey_model_error_may_be_a_prior(tmp_path):
    # a free crust model error: each site integrates it (grid, 3 free parameters) and
    # reports it in km within its prior; with one datum per site the error is weakly
    # constrained, so the check is that it is a proper posterior inside the prior
    study = write_study(tmp_path, extra_survey='crust_model_error = { prior = '
                        '"log-uniform", min = 0.01, max = 5.0 }\ngrid_points = 27000')
    truth = truth_table(1400.0, [20.0, 30.0, 40.0], pressure_every=100).assign(
        **{"crustal_thickness.model_error": 1.0})
    sites = write_sites(tmp_path, study, truth, 3)
    result = survey(study, sites, out=tmp_path / "out", workers=1, quiet=True)
    rows = result.summary.set_index(["site", "parameter"])
    names = set(result.summary["parameter"])
    error = "crustal_thickness.model_error"
    assert error in names
    assert (result.summary[result.summary["parameter"] == error]["unit"] == "km").all()
    assert result.records[0]["method"] == "grid" and not result.failed
    for site in ("S01", "S02", "S03"):
        q = rows.loc[(site, error)]
        assert 0.01 <= q["q2.5"] < q["median"] < q["q97.5"] <= 5.0


def _session_processes(session: int) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[3]) == session and fields[0] != "Z":  # session id, not a zombie
            found.append(int(entry.name))
    return found


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")
def test_workers_end_when_the_survey_is_killed(inputs, tmp_path):
    _, study, sites = inputs
    many = write_sites(tmp_path, study, truth_table(1390.0, np.linspace(15, 45, 12)), 9)
    out = tmp_path / "killed"
    command = [sys.executable, "-m", "lidmelt.cli", "survey", str(study),
               "--sites", str(many), "--out", str(out), "--workers", "2", "--quiet"]
    child = subprocess.Popen(command, start_new_session=True, stdout=subprocess.DEVNULL,
                             stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 120
        while _finished(out) < 1 and time.monotonic() < deadline and child.poll() is None:
            time.sleep(0.05)
        others = [p for p in _session_processes(child.pid) if p != child.pid]
        assert others, "no worker process was running"
        os.kill(child.pid, signal.SIGKILL)  # the survey process only, not its group
        child.wait()
        deadline = time.monotonic() + 10
        while _session_processes(child.pid) and time.monotonic() < deadline:
            time.sleep(0.1)
        left = _session_processes(child.pid)
    finally:
        for pid in _session_processes(child.pid):  # never leave them, even on failure
            os.kill(pid, signal.SIGKILL)
    assert not left, f"workers outlived the survey: {left}"


def test_a_study_object_gives_the_survey_of_its_file(inputs, tmp_path):
    import lidmelt

    _, study_path, sites = inputs
    study = lidmelt.Study.from_file(study_path)  # a [survey] table is read and kept
    assert study.survey == {"equilibration": "top"}
    by_path = lidmelt.survey(study_path, sites, out=tmp_path / "path", workers=1,
                             quiet=True)
    by_object = lidmelt.survey(study, sites, out=tmp_path / "object", workers=1,
                               quiet=True)
    assert _summary_text(tmp_path / "path") == _summary_text(tmp_path / "object")
    assert [r["rows"] for r in by_path.records] == [r["rows"] for r in by_object.records]
    record = json.loads((tmp_path / "object" / "survey.json").read_text())
    assert record["fingerprint"] == json.loads(
        (tmp_path / "path" / "survey.json").read_text())["fingerprint"]
    # the object resumes the folder of the path call (same run), a changed study not
    lidmelt.survey(study, sites, out=tmp_path / "path", workers=1, quiet=True,
                   resume=True)
    hotter = study.with_overrides({"water": 0.0})
    with pytest.raises(InputError, match="changed"):
        lidmelt.survey(hotter, sites, out=tmp_path / "path", workers=1, quiet=True,
                       resume=True)


def test_study_from_file_names_a_bad_survey_key_with_its_line(tmp_path):
    from lidmelt.inversion import Study

    path = write_study(tmp_path, extra_survey="grid_pints = 500")
    with pytest.raises(InputError, match="grid_pints") as caught:
        Study.from_file(path)
    assert caught.value.line == 14


_SCRIPT = """\
import lidmelt

{call}
"""


@pytest.mark.parametrize("guarded", [False, True])
def test_a_script_without_a_main_guard_gets_one_clear_line(inputs, tmp_path, guarded):
    _, study, sites = inputs
    call = (f"lidmelt.survey({str(study)!r}, {str(sites)!r}, out={str(tmp_path / 'out')!r}, "
            "workers=2, quiet=True)")
    if guarded:
        call = 'if __name__ == "__main__":\n    ' + call
    script = tmp_path / "run_area.py"
    script.write_text(_SCRIPT.format(call=call), encoding="utf-8")
    done = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                          timeout=300, env={**os.environ, "PYTHONPATH": os.pathsep.join(
                              p for p in sys.path if p)})
    if guarded:
        assert done.returncode == 0, done.stderr
        assert (tmp_path / "out" / "sites_summary.csv").is_file()
        return
    assert done.returncode != 0
    last = done.stderr.strip().splitlines()[-1]
    assert "run_area.py, line 3" in last and "if __name__ ==" in last and "workers=1" in last
    assert "BrokenProcessPool" not in done.stderr and done.stderr.count("main guard") == 1
    assert not (tmp_path / "out").exists()  # refused before any folder was made


def test_resume_runs_again_the_sites_whose_worker_failed(inputs, tmp_path):
    _, study, sites = inputs
    out = tmp_path / "run"
    first = survey(study, sites, out=out, workers=1, quiet=True)
    record_path = next((out / "sites").glob("0002-*/site.json"))
    record = json.loads(record_path.read_text())
    # what a broken pool leaves behind (run._as_outcome): no answer about the site
    record.update(status="failed: the local worker processes stopped", worker_failed=True,
                  rows=[{**row, "median": None} for row in record["rows"]])
    record_path.write_text(json.dumps(record), encoding="utf-8")
    resumed = survey(study, sites, out=out, workers=1, quiet=True, resume=True)
    assert not resumed.failed
    assert [r["rows"] for r in resumed.records] == [r["rows"] for r in first.records]


def test_survey_nc_holds_every_site_and_opens_in_arviz(inputs, tmp_path):
    import warnings

    az = pytest.importorskip("arviz")

    _, study, sites = inputs
    result = survey(study, sites, out=tmp_path / "run", workers=1, quiet=True)
    path = tmp_path / "run" / "survey.nc"
    from lidmelt.inversion.outputs.folder import read_manifest

    assert "survey.nc" in json.dumps(read_manifest(tmp_path / "run"))  # lidmelt's own file
    check_survey_nc(tmp_path / "run", result)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no complaint from ArviZ about the layout
        idata = az.from_netcdf(path)
    assert {"posterior", "constant_data"} <= set(idata.groups())
    assert idata.posterior["lithosphere_thickness"].dims == ("chain", "draw", "site")
    assert list(idata.constant_data["site_seed"].values) == [r["seed"] for r in
                                                             result.records]
    assert "survey.nc" in (tmp_path / "run" / "report.md").read_text(encoding="utf-8")
def test_sites_table_reads_rare_earth_ratios_with_their_kinds_rules(tmp_path):
    from lidmelt.forward import melt_column
    from lidmelt.inversion.observations import CrustalThickness, RareEarthRatios
    from lidmelt.inversion.survey import SurveySettings
    from lidmelt.inversion.survey.sites import site_observations
    from scipy import stats

    path = tmp_path / "s.csv"
    path.write_text("site,thickness_km,thickness_sigma_km,la_yb_cn,la_yb_sigma_cn\n"
                    "A,6,0.5,1.5,0.15\nB,6,0.5,,\nC,6,0.5,0,0.1\n", encoding="utf-8")
    table = read_sites(path)
    a, b, c = table.sites
    assert a.error is None and b.error is None
    # the ratio rule of the rare_earths table (> 0), with file, line and column
    assert c.error.startswith(f"{path}, line 4, column 'la_yb_cn': value 0 must be > 0")
    sets = site_observations(a, SurveySettings(rare_earth_model_error=0.1))
    assert [type(s) for s in sets] == [CrustalThickness, RareEarthRatios]
    assert [type(s) for s in site_observations(b, SurveySettings())] == [CrustalThickness]
    column = melt_column(np.array([1400.0]), np.array([40.0]))
    model = sets[1].predict(column)["value"][0, 0]
    # log-normal with log sd sqrt(0.1^2 + 0.1^2) (relative sigma 0.15/1.5 and the
    # survey's relative model error), as scipy.stats.lognorm
    expected = stats.lognorm(np.hypot(0.1, 0.1), scale=model).logpdf(1.5)
    np.testing.assert_allclose(sets[1].pointwise_log_likelihood(column)[0, 0], expected,
                               rtol=1e-10)


def test_survey_rare_earth_source_and_transition_reach_every_site(tmp_path):
    # [survey] rare_earth_source / rare_earth_transition are the sites' block options,
    # checked as a rare_earths block's are
    from lidmelt.forward.trace import ELEMENTS
    from lidmelt.inversion import InputError
    from lidmelt.inversion.study.survey_table import parse_survey_table
    from lidmelt.inversion.survey.sites import site_observations

    path = tmp_path / "s.csv"
    path.write_text("site,thickness_km,thickness_sigma_km,la_yb_cn,la_yb_sigma_cn\n"
                    "A,6,0.5,1.5,0.15\n", encoding="utf-8")
    source = {e: 0.1 * (k + 1) for k, e in enumerate(ELEMENTS)}
    settings = parse_survey_table({"rare_earth_source": source,
                                   "rare_earth_transition": [2.2, 2.9]})
    (site,) = read_sites(path).sites
    ree = site_observations(site, settings)[1]
    assert ree.source == source and ree.transition == (2.2, 2.9)
    assert parse_survey_table({}).rare_earth_source == "workman_hart_2005"
    with pytest.raises(InputError, match="survey.rare_earth_source.*unknown source"):
        parse_survey_table({"rare_earth_source": "nope"})
    with pytest.raises(InputError, match="survey.rare_earth_transition"):
        parse_survey_table({"rare_earth_transition": [3.0, 2.0]})


def test_extra_rare_earth_ratios_need_la_yb_in_the_header(tmp_path, capsys):
    # kind rare_earths takes Sm/Yb and Dy/Yb only beside La/Yb, its main ratio (its own
    # table requires la_yb_cn, DEVELOPERS.md "Adding an observation kind"): a sites file
    # with a Sm/Yb column and no La/Yb column can never give a usable ratio, so it stops
    # at its header line with exit 2 instead of failing every site that has a ratio
    study = write_study(tmp_path)
    for extra in ("sm_yb", "dy_yb"):
        path = tmp_path / f"{extra}.csv"
        path.write_text(f"site,thickness_km,thickness_sigma_km,{extra}_cn,{extra}_sigma_cn\n"
                        "A,6,0.5,1.5,0.1\nB,6,0.5,,\n", encoding="utf-8")
        with pytest.raises(InputError, match=rf"^{re.escape(str(path))}, line 1, column '{extra}_cn': "
                           r".*la_yb_cn and la_yb_sigma_cn"):
            read_sites(path)
        code = main(["survey", str(study), "--sites", str(path), "--out",
                     str(tmp_path / "out"), "--quiet"])
        err = capsys.readouterr().err
        assert code == 2 and err.count("\n") == 1 and "line 1, column" in err
        assert not (tmp_path / "out").exists()


def test_partial_rare_earth_rows_fail_their_site_with_line_and_column(tmp_path):
    from lidmelt.inversion.observations import RareEarthRatios
    from lidmelt.inversion.survey import SurveySettings
    from lidmelt.inversion.survey.sites import site_observations

    path = tmp_path / "s.csv"
    path.write_text("site,thickness_km,thickness_sigma_km,la_yb_cn,la_yb_sigma_cn,"
                    "sm_yb_cn,sm_yb_sigma_cn,dy_yb_cn,dy_yb_sigma_cn\n"
                    "A,6,0.5,,,1.5,0.1,,\n"          # Sm/Yb without La/Yb
                    "B,6,0.5,,,,,1.2,0.1\n"          # Dy/Yb without La/Yb
                    "C,6,0.5,2.0,,,,,\n"             # La/Yb without its sigma
                    "D,6,0.5,,0.2,,,,\n"             # a sigma without its La/Yb
                    "E,6,0.5,2.0,0.2,1.5,,,\n"       # Sm/Yb without its sigma
                    "F,6,0.5,2.0,0.2,,,1.2,0.1\n"    # La/Yb and Dy/Yb: usable
                    "G,6,0.5,,,,,,\n", encoding="utf-8")  # no ratio: crust only
    sites = {s.name: s for s in read_sites(path).sites}
    expect = {"A": (2, "sm_yb_cn", "give la_yb_cn and la_yb_sigma_cn too"),
              "B": (3, "dy_yb_cn", "give la_yb_cn and la_yb_sigma_cn too"),
              "C": (4, "la_yb_sigma_cn", "empty cell beside la_yb_cn"),
              "D": (5, "la_yb_cn", "empty cell beside la_yb_sigma_cn"),
              "E": (6, "sm_yb_sigma_cn", "empty cell beside sm_yb_cn")}
    for name, (line, column, rule) in expect.items():
        error = sites[name].error
        assert error.startswith(f"{path}, line {line}, column '{column}': "), error
        assert rule in error and "\n" not in error
    assert sites["F"].error is None and sites["G"].error is None
    block = site_observations(sites["F"], SurveySettings())[1]
    assert isinstance(block, RareEarthRatios) and block.ratios == ("la_yb", "dy_yb")
    assert site_observations(sites["G"], SurveySettings())[1:] == []


#: What lidmelt itself writes on standard error: its own lines and its progress bars.
_OWN_STDERR = re.compile(r"^(lidmelt( survey)?: |(sites|Tp likelihoods|site posteriors): "
                         r"+\d+%\|)")


@pytest.mark.parametrize("mode", ["independent", "joint"])
def test_survey_stderr_holds_only_lidmelt_lines(tmp_path, mode):
    # a fresh interpreter with Python's default warning filters, as a user runs it (the
    # test process's own filters would hide or record a raw warning); two workers, a
    # site with a pressure and one failing on a bad value, progress bars on
    study = write_study(tmp_path, extra_survey="grid_points = 4000\ntp_nodes = 61")
    sites = tmp_path / "sites.csv"
    sites.write_text(_SITES + "A,0,9.6,0.4,0.57,0.1\nB,10,7.8,0.4,,\nC,20,5.1,0.4,1.2,0.1\n"
                     "D,30,6.0,-0.4,,\n", encoding="utf-8")
    run = subprocess.run([sys.executable, "-m", "lidmelt.cli", "survey", str(study),
                          "--sites", str(sites), "--out", str(tmp_path / "out"),
                          "--mode", mode, "--workers", "2"],
                         capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    lines = [line for line in re.split(r"[\r\n]+", run.stderr) if line.strip()]
    assert any(line.startswith("lidmelt survey: site 'D': failed:") for line in lines)
    for word in ("Warning", "Traceback"):
        assert word not in run.stderr, run.stderr
    assert all(_OWN_STDERR.match(line) for line in lines), run.stderr
