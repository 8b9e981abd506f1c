"""Faults a tester tries on purpose: outputs that would destroy inputs, odd save targets
(devices, symlinks, hard links, read-only files), scene files that are not files, duplicate
JSON keys, hostile names, limits that must hold, and worker processes that must not outlive
their parent.  One named test per fault (issue: reliability of files, limits and processes).

Facts of the trade relied on here are "common practice" of POSIX systems: a rename replaces a
directory entry (so it breaks hard links and replaces device nodes), a symlink is a name for
another file, and mode 0444 marks a file read-only."""
from __future__ import annotations

import json
import os
import shutil
import stat
import sys
from pathlib import Path

import numpy as np
import pytest

from raytrace import cli
from raytrace.atomic import OutputRefused, atomic_write_text, clashing_outputs
from raytrace.errors import SceneError
from raytrace.scene_io import load_scene, save_scene, scene_from_text

SAMPLES = Path(__file__).resolve().parent.parent / "samples"
WINDOW = SAMPLES / "oblique-window.json"


def run(args, capsys):
    code = cli.main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture
def scene_file(tmp_path) -> Path:
    p = tmp_path / "s.json"
    shutil.copy(WINDOW, p)
    return p


# ----------------------------------------------------------------------------- 2: outputs vs inputs

@pytest.mark.parametrize("flag", ["--json", "--csv", "--detectors-csv"])
def test_trace_refuses_an_output_that_is_the_scene(scene_file, flag, capsys):
    before = scene_file.read_bytes()
    code, _, err = run(["trace", scene_file, flag, scene_file, "--quiet"], capsys)
    assert code == cli.EXIT_USAGE
    assert f"{flag} {scene_file}: found the same file as the scene" in err
    assert scene_file.read_bytes() == before


def test_trace_refuses_an_output_reaching_the_scene_through_a_symlink_or_hard_link(scene_file, capsys):
    before = scene_file.read_bytes()
    sym, hard = scene_file.with_name("sym.json"), scene_file.with_name("hard.json")
    sym.symlink_to(scene_file.name)
    os.link(scene_file, hard)
    for target in (sym, hard):
        code, _, err = run(["trace", scene_file, "--json", target, "--quiet"], capsys)
        assert code == cli.EXIT_USAGE, target
        assert "the same file as the scene" in err
    assert scene_file.read_bytes() == before


def test_trace_refuses_two_outputs_on_one_file(scene_file, tmp_path, capsys):
    out = tmp_path / "both.csv"
    code, _, err = run(["trace", scene_file, "--csv", out, "--detectors-csv", tmp_path / "." / "both.csv",
                        "--quiet"], capsys)
    assert code == cli.EXIT_USAGE
    assert "--detectors-csv" in err and "the same file as --csv" in err
    assert not out.exists()


def test_sweep_refuses_a_csv_that_is_the_scene(scene_file, capsys):
    before = scene_file.read_bytes()
    code, _, err = run(["sweep", scene_file, "--vary", "trace.seed=1,2", "--csv", scene_file,
                        "--workers", "1", "--quiet"], capsys)
    assert code == cli.EXIT_USAGE
    assert "the same file as the scene" in err
    assert scene_file.read_bytes() == before


def test_outputs_to_dev_null_and_stdout_may_be_shared(scene_file, capsys):
    assert clashing_outputs({"scene": str(scene_file)}, {"--json": "/dev/null", "--csv": "/dev/null"}) == []
    code, out, _ = run(["trace", scene_file, "--json", "-", "--quiet"], capsys)
    assert code == cli.EXIT_OK
    assert json.loads(out)["mode"] == "branching"


@pytest.mark.parametrize("flag", ["--json", "--csv"])
def test_an_output_on_stdout_without_quiet_stays_valid_and_the_report_goes_to_stderr(scene_file, capsys, flag):
    code, out, err = run(["trace", scene_file, flag, "-", "--routes", "2"], capsys)
    assert code == cli.EXIT_OK
    if flag == "--json":
        assert json.loads(out)["mode"] == "branching"
    else:
        assert out.splitlines()[0].startswith("ray_id,parent_id,")
    assert "Reached detectors:" in err and "Top routes" in err and "Reached detectors:" not in out


def test_two_outputs_on_stdout_are_refused(scene_file, capsys):
    code, out, err = run(["trace", scene_file, "--json", "-", "--csv", "-"], capsys)
    assert code == cli.EXIT_USAGE and out == ""
    assert "--json and --csv" in err and "at most one of them on standard output" in err


# ----------------------------------------------------------------------------- 3, 4: save targets

@pytest.mark.skipif(not os.path.exists("/dev/null"), reason="needs /dev/null")
def test_writing_to_dev_null_keeps_the_device(scene_file, capsys):
    code, _, err = run(["trace", scene_file, "--csv", "/dev/null", "--json", "/dev/null", "--quiet"], capsys)
    assert code == cli.EXIT_OK, err
    assert stat.S_ISCHR(os.stat("/dev/null").st_mode)


def test_writing_to_a_fifo_writes_into_it_and_keeps_it(tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    import threading
    got = []
    reader = threading.Thread(target=lambda: got.append(fifo.read_text()))
    reader.start()
    atomic_write_text(fifo, "a,b\n1,2\n")
    reader.join(5)
    assert got == ["a,b\n1,2\n"]
    assert stat.S_ISFIFO(os.stat(fifo).st_mode)


def test_a_directory_as_output_is_refused_with_a_clear_message(scene_file, tmp_path, capsys):
    code, _, err = run(["trace", scene_file, "--json", tmp_path, "--quiet"], capsys)
    assert code == cli.EXIT_OUTPUT
    assert "is a directory, not a file" in err


def test_saving_through_a_symlink_updates_the_real_file(scene_file, tmp_path):
    link = tmp_path / "link.json"
    link.symlink_to(scene_file.name)
    scene = load_scene(scene_file)
    scene.name = "renamed through the link"
    save_scene(scene, link)
    assert link.is_symlink()
    assert load_scene(scene_file).name == "renamed through the link"


def test_saving_over_a_read_only_file_is_refused(scene_file):
    scene = load_scene(scene_file)
    before = scene_file.read_bytes()
    scene_file.chmod(0o444)
    try:
        scene.name = "changed"
        with pytest.raises(OutputRefused, match="read-only"):
            save_scene(scene, scene_file)
        assert scene_file.read_bytes() == before
    finally:
        scene_file.chmod(0o644)


def test_saving_a_hard_linked_file_updates_every_name(scene_file, tmp_path):
    other = tmp_path / "other-name.json"
    os.link(scene_file, other)
    scene = load_scene(scene_file)
    scene.name = "seen under both names"
    save_scene(scene, scene_file)
    assert os.stat(scene_file).st_ino == os.stat(other).st_ino
    assert load_scene(other).name == "seen under both names"
    assert [p.name for p in tmp_path.iterdir() if p.name.endswith(".tmp")] == []


def test_a_plain_save_keeps_the_file_mode(scene_file):
    scene_file.chmod(0o640)
    save_scene(load_scene(scene_file), scene_file)
    assert stat.S_IMODE(os.stat(scene_file).st_mode) == 0o640


# ----------------------------------------------------------------------------- 13b: what is read

def test_a_fifo_as_scene_is_refused_without_waiting(tmp_path):
    fifo = tmp_path / "scene.json"
    os.mkfifo(fifo)
    with pytest.raises(SceneError) as exc:
        load_scene(fifo)     # would wait for a writer forever if opened
    assert "a pipe (FIFO)" in str(exc.value.problems[0]) and "a regular scene file" in str(exc.value.problems[0])


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_dev_zero_as_scene_is_refused(capsys):
    code, out, _ = run(["check", "/dev/zero"], capsys)
    assert code == cli.EXIT_SCENE
    assert "found <a character device>; expected a regular scene file" in out


def test_an_oversized_scene_file_is_refused_after_a_bounded_read(tmp_path, monkeypatch):
    import raytrace.scene_io as sio
    monkeypatch.setattr(sio, "MAX_SCENE_BYTES", 1000)
    big = tmp_path / "big.json"
    big.write_text(" " * 5000 + WINDOW.read_text())
    with pytest.raises(SceneError, match="a file of more than 0.000954 MB"):
        load_scene(big)


# ----------------------------------------------------------------------------- 11: duplicate keys

def test_a_duplicate_top_level_key_is_refused_with_its_path(tmp_path):
    text = WINDOW.read_text().rstrip().rstrip("}") + ', "parts": []}'
    with pytest.raises(SceneError) as exc:
        scene_from_text(text)
    msgs = [str(p) for p in exc.value.problems]
    assert msgs == ["$.parts: found <the key 'parts' given more than once>; "
                    "expected each key once in an object (only the last would count)"]


def test_a_duplicate_nested_key_names_the_file_and_path(tmp_path):
    data = json.loads(WINDOW.read_text())
    text = json.dumps(data, indent=1)
    # give the first source its flux twice
    text = text.replace('"flux": ', '"flux": 5, "flux": ', 1)
    p = tmp_path / "dup.json"
    p.write_text(text)
    with pytest.raises(SceneError) as exc:
        load_scene(p)
    assert str(exc.value.problems[0]).startswith(f"{p}: $.sources[0].flux: found <the key 'flux' given more than once>")


# ----------------------------------------------------------------------------- 12: names, huge flux

@pytest.mark.parametrize("bad, why", [("\\udc80", "lone surrogate"), ("\\u001b[31mred", "control characters"),
                                      ("two\\nlines", "control characters")])
def test_names_with_surrogates_or_control_characters_are_refused(tmp_path, bad, why, capsys):
    text = WINDOW.read_text()
    data = json.loads(text)
    old = data["sources"][0]["name"]
    text = text.replace(json.dumps(old), '"' + bad + '"', 1)
    p = tmp_path / "names.json"
    p.write_text(text)
    code, out, _ = run(["check", p], capsys)
    assert code == cli.EXIT_SCENE
    assert "$.sources[0].name" in out and why in out
    assert "\x1b" not in out and "\n" not in out.strip()   # the terminal sees escapes, not raw codes
    out.encode("utf-8")                                     # printable as UTF-8


def test_a_huge_flux_is_refused_so_no_infinity_reaches_the_json(tmp_path, capsys):
    data = json.loads(WINDOW.read_text())
    data["sources"][0]["flux"] = 1e308
    p = tmp_path / "huge.json"
    p.write_text(json.dumps(data))
    code, out, _ = run(["check", p], capsys)
    assert code == cli.EXIT_SCENE
    assert "$.sources[0].flux: found 1e+308" in out


# ----------------------------------------------------------------------------- 7: band spectra

def _window_with_band(center, fwhm):
    from raytrace.scene_io import scene_from_dict
    data = json.loads(WINDOW.read_text())
    data["sources"][0]["spectrum"] = {"band": {"center_nm": center, "fwhm_nm": fwhm}}
    return scene_from_dict(data)


@pytest.mark.parametrize("sampling", ["even", "random"])
def test_a_wide_band_is_truncated_to_the_materials_data_and_warned(sampling):
    # 400 nm centre, 600 nm FWHM: a plain Gaussian puts 25 % of the rays below 230 nm, the
    # start of the data for air (and 16 % at negative wavelengths)
    import raytrace
    result = raytrace.trace(_window_with_band(400.0, 600.0), rays=2000, sampling=sampling)
    wl = result.raw.wavelengths
    assert wl.min() >= 230.0 and wl.max() <= 1690.0
    # share outside 230-1690 nm of N(400, 600 / 2.3548): from the normal CDF (common practice)
    from statistics import NormalDist
    d = NormalDist(400.0, 600.0 / (2 * (2 * np.log(2)) ** 0.5))
    outside = 1 - (d.cdf(1690.0) - d.cdf(230.0))
    assert [w for w in result.warnings if "of its band" in w] == [
        f"source 'probe beam': {100 * outside:.3g} % of its band (centre 400 nm, FWHM 600 nm) lies outside "
        "230-1690 nm, the range of the materials' data; the band is truncated there and its flux carried by the rest"]
    result.ledger.check()


def test_a_band_entirely_outside_the_materials_data_is_refused():
    import raytrace
    with pytest.raises(SceneError) as exc:
        raytrace.trace(_window_with_band(19000.0, 10.0), rays=10)
    assert str(exc.value.problems[0]).startswith("$.sources[0].spectrum.band: found <centre 19000 nm, FWHM 10 nm")


def test_a_narrow_band_inside_the_data_is_sampled_as_before():
    from raytrace.scene import Spectrum
    from raytrace.sources import sample_spectrum
    from statistics import NormalDist
    rng = np.random.default_rng(1)
    wl = sample_spectrum(Spectrum.band(525.0, 30.0), 64, rng, True, (436.8, 1052.0))
    d = NormalDist(525.0, 30.0 / (2 * (2 * np.log(2)) ** 0.5))
    assert sorted(wl) == pytest.approx([d.inv_cdf((i + 0.5) / 64) for i in range(64)], rel=1e-12)


# ----------------------------------------------------------------------------- 9: sweep names

def test_sweep_refuses_two_names_for_one_number(scene_file, tmp_path, capsys):
    out = tmp_path / "sweep.csv"
    code, _, err = run(["sweep", scene_file, "--vary", "probe beam.flux=1,2", "--vary", "$.sources[0].flux=3,4",
                        "--csv", out, "--workers", "1", "--quiet"], capsys)
    assert code == cli.EXIT_USAGE
    assert "--vary $.sources[0].flux: found <the number probe beam.flux sets too ($.sources[0].flux)>" in err
    assert not out.exists()


def test_sweep_refuses_wavelength_together_with_a_source_wavelength(scene_file, tmp_path, capsys):
    code, _, err = run(["sweep", scene_file, "--vary", "wavelength=500,600", "--vary", "probe beam.wavelength=550,650",
                        "--csv", tmp_path / "s.csv", "--workers", "1", "--quiet"], capsys)
    assert code == cli.EXIT_USAGE
    assert "sets too" in err


@pytest.mark.parametrize("spec", ["trace.seed=1:2:1000000000", "trace.seed=1:400:400"])
def test_sweep_counts_and_grids_are_bounded(scene_file, tmp_path, spec, capsys):
    args = ["sweep", scene_file, "--vary", spec, "--csv", tmp_path / "s.csv", "--workers", "1", "--quiet"]
    if spec.endswith(":400"):
        args[2:2] = ["--vary", "probe beam.flux=1:2:400"]     # 400 x 400 = 160,000 points
    code, _, err = run(args, capsys)
    assert code == cli.EXIT_USAGE
    assert "expected at most 100,000 points in one sweep" in err


# ----------------------------------------------------------------------------- 10: workers

def test_workers_default_to_and_are_capped_at_the_usable_cpus(scene_file, monkeypatch, capsys):
    from raytrace import api
    from raytrace.parallel import capped_workers
    usable = len(os.sched_getaffinity(0))
    assert capped_workers(None) == usable and capped_workers(1000) == usable and capped_workers(1) == 1
    seen = []
    real = api.trace
    monkeypatch.setattr(api, "trace", lambda *a, **k: seen.append(k["workers"]) or real(*a, **k))
    for extra in ([], ["--workers", "1000"]):
        assert run(["trace", scene_file, "--quiet", *extra], capsys)[0] == cli.EXIT_OK
    assert seen == [usable, usable]


def _children(pid: int) -> set[int]:
    kids = set()
    for task in Path(f"/proc/{pid}/task").iterdir():
        text = (task / "children").read_text().split()
        kids |= {int(t) for t in text}
    return kids


def _running(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"    # a zombie has ended; only its exit status is left


@pytest.mark.skipif(not Path("/proc/self/task").exists(), reason="reads worker processes from /proc")
@pytest.mark.parametrize("command", ["sweep", "trace"])
def test_sigterm_to_the_parent_ends_the_pool_workers(scene_file, tmp_path, command):
    import signal
    import subprocess
    import time
    if len(os.sched_getaffinity(0)) < 2:
        pytest.skip("needs two usable CPUs for a pool")
    args = (["sweep", str(scene_file), "--vary", "trace.seed=1:8:8", "--rays", "400000", "--csv",
             str(tmp_path / "s.csv"), "--workers", "2"] if command == "sweep" else
            ["trace", str(scene_file), "--rays", "3000000", "--workers", "2"])
    # a trace with the compiled kernel runs its chunks on threads of the one process; the array
    # kernel keeps the process pool whose workers must not outlive the parent
    env = {**os.environ, "RAYTRACE_KERNEL": "numpy"} if command == "trace" else None
    proc = subprocess.Popen([sys.executable, "-m", "raytrace.cli", *args, "--quiet"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    kids: set[int] = set()
    try:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and len(kids) < 2 and proc.poll() is None:
            time.sleep(0.2)
            kids = {k for k in _children(proc.pid)}
        assert len(kids) >= 2, "the pool did not start"
        proc.send_signal(signal.SIGTERM)
        proc.wait(10)
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline and any(_running(k) for k in kids):
            time.sleep(0.1)
        assert not any(_running(k) for k in kids), "workers outlived their parent"
    finally:
        if proc.poll() is None:
            proc.kill()
        for k in kids:          # a failed run must not leave orphans behind
            if _running(k):
                os.kill(k, signal.SIGKILL)


@pytest.mark.skipif(not Path("/proc/self/task").exists(), reason="reads the process's threads from /proc")
@pytest.mark.parametrize("sig", ["SIGINT", "SIGTERM"])
def test_a_threaded_trace_stops_on_a_signal(tmp_path, sig):
    """The compiled kernel traces chunks on threads of the one process: Ctrl-C (SIGINT) stops it
    with exit status 130 and "interrupted", no traceback, once the running chunks end; SIGTERM
    ends it at once (Python's default action, status -15).  Either way nothing is written."""
    import signal
    import subprocess
    import time
    if len(os.sched_getaffinity(0)) < 2:
        pytest.skip("needs two usable CPUs for two chunk threads")
    out = tmp_path / "t.json"
    proc = subprocess.Popen([sys.executable, "-m", "raytrace.cli", "trace", str(SAMPLES / "light-pipe-90.json"),
                             "--rays", "3000000", "--workers", "2", "--json", str(out), "--quiet"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                            # one thread per maths library: the only others are the chunk threads
                            env={**os.environ, "RAYTRACE_KERNEL": "numba", "OPENBLAS_NUM_THREADS": "1",
                                 "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"})
    try:
        deadline = time.monotonic() + 120
        threads = 0
        while time.monotonic() < deadline and threads < 3 and proc.poll() is None:
            time.sleep(0.2)
            threads = len(list(Path(f"/proc/{proc.pid}/task").iterdir()))
        assert threads >= 3, "the chunk threads did not start"     # the main thread and two chunk threads
        time.sleep(0.5)
        proc.send_signal(getattr(signal, sig))
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    if sig == "SIGINT":
        assert proc.returncode == 130, err
        assert "interrupted" in err and "Traceback" not in err, err
    else:
        assert proc.returncode == -signal.SIGTERM, err
    assert not out.exists()


# ----------------------------------------------------------------------------- 8: memory limit

PIPE = SAMPLES / "light-pipe-90.json"


def test_the_memory_limit_is_set_from_the_command_line(capsys):
    code, _, err = run(["trace", PIPE, "--rays", "60000", "--max-memory-mb", "100", "--quiet"], capsys)
    assert code == cli.EXIT_LIMIT
    assert "Traceback" not in err
    assert 'max_memory_mb = 100 MB (raise it with --max-memory-mb, "max_memory_mb" under "trace" in the scene' in err


def test_the_memory_limit_is_set_from_the_scene_file_and_saved(tmp_path, capsys):
    data = json.loads(PIPE.read_text())
    data["trace"]["max_memory_mb"] = 1
    p = tmp_path / "limited.json"
    p.write_text(json.dumps(data))
    code, _, err = run(["trace", p, "--rays", "2000", "--quiet"], capsys)
    assert code == cli.EXIT_LIMIT and "max_memory_mb = 1 MB" in err
    # the flag wins over the file, as for every trace setting
    assert run(["trace", p, "--rays", "2000", "--max-memory-mb", "4096", "--quiet"], capsys)[0] == cli.EXIT_OK
    scene = load_scene(p)
    assert scene.settings.max_memory_mb == 1.0
    save_scene(scene, tmp_path / "again.json")
    assert json.loads((tmp_path / "again.json").read_text())["trace"]["max_memory_mb"] == 1.0
    assert "max_memory_mb" not in json.loads(WINDOW.read_text())["trace"]     # default: not written


@pytest.mark.parametrize("bad", [0, -5, 1e12])
def test_a_memory_limit_out_of_range_is_refused(tmp_path, bad, capsys):
    data = json.loads(WINDOW.read_text())
    data["trace"]["max_memory_mb"] = bad
    p = tmp_path / "bad.json"
    p.write_text(json.dumps(data))
    code, out, _ = run(["check", p], capsys)
    assert code == cli.EXIT_SCENE and "$.trace.max_memory_mb" in out
    assert run(["trace", WINDOW, "--max-memory-mb", "nan"], capsys)[0] == cli.EXIT_USAGE


def test_sweep_varies_and_passes_the_memory_limit(scene_file, tmp_path, capsys):
    import csv as csvmod
    out = tmp_path / "mem.csv"
    code, _, _ = run(["sweep", PIPE, "--vary", "trace.max_memory_mb=1,4096", "--rays", "2000",
                      "--csv", out, "--workers", "1", "--quiet"], capsys)
    assert code == cli.EXIT_SWEEP_POINTS
    rows = list(csvmod.DictReader(out.open()))
    assert rows[0]["status"].startswith("stopped: generation") and "max_memory_mb = 1 MB" in rows[0]["status"]
    assert rows[1]["status"] == "ok"


def test_out_of_memory_is_exit_3_with_a_message_not_a_traceback(monkeypatch, capsys):
    from raytrace import api

    def exhausted(*_a, **_k):
        raise MemoryError
    monkeypatch.setattr(api, "trace", exhausted)
    code, _, err = run(["trace", WINDOW, "--max-memory-mb", "800", "--quiet"], capsys)
    assert code == cli.EXIT_LIMIT
    assert "Traceback" not in err and "ran out of memory" in err and "max_memory_mb = 800 MB" in err


def test_a_max_generations_beyond_a_million_is_refused(tmp_path, capsys):
    assert run(["trace", WINDOW, "--max-generations", "1000001"], capsys)[0] == cli.EXIT_USAGE
    data = json.loads(WINDOW.read_text())
    data["trace"]["max_generations"] = 10**15
    p = tmp_path / "deep.json"
    p.write_text(json.dumps(data))
    code, out, _ = run(["check", p], capsys)
    assert code == cli.EXIT_SCENE and "$.trace.max_generations" in out


@pytest.mark.skipif(not Path("/proc/self/smaps_rollup").exists(), reason="measures memory from /proc")
@pytest.mark.parametrize("limit_mb, rays, outcome", [(300, 20000, "stopped"), (250, 4000, "ok")])
def test_the_memory_limit_holds_for_a_recorded_trace(limit_mb, rays, outcome):
    """Every segment of a light pipe recorded: the trace either fits or stops, and the memory
    it adds to the process (summed PSS of the process and its workers, sampled every 50 ms)
    stays under the limit."""
    import raytrace
    from raytrace.bench import PeakMemory
    from raytrace.errors import BudgetExceeded
    scene = load_scene(PIPE)
    with PeakMemory() as before:
        pass
    with PeakMemory() as pm:
        try:
            raytrace.trace(scene, rays=rays, record="all", max_memory_mb=limit_mb, workers=2)
            got = "ok"
        except BudgetExceeded:
            got = "stopped"
    assert got == outcome
    assert (pm.peak - before.peak) / 1e6 < limit_mb


def test_ray_table_refuses_a_table_over_the_limit_and_write_csv_streams_it(tmp_path):
    import raytrace
    from raytrace.errors import BudgetExceeded
    from raytrace.raytable import ray_table, write_csv
    scene = load_scene(PIPE)
    small = raytrace.trace(scene, rays=300, record="all", max_memory_mb=12)
    with pytest.raises(BudgetExceeded, match="the ray table of .* segments needs about"):
        ray_table(small)
    n = write_csv(small, tmp_path / "streamed.csv")
    full = raytrace.trace(scene, rays=300, record="all")
    assert (tmp_path / "streamed.csv").read_text() == ray_table(full).to_csv()
    assert n == len(ray_table(full))


def test_csv_writers_hold_one_block_at_a_time(monkeypatch, tmp_path):
    """Peak Python memory (tracemalloc) of streaming the ray table and an 8,000-bin detector's
    profiles, against building the whole text first as before."""
    import io
    import tracemalloc
    import raytrace
    import raytrace.raytable as rt
    from raytrace.detectors import detector_reports, profiles_rows, write_profiles
    data = json.loads(WINDOW.read_text())
    data["detectors"] = data["detectors"][:1]
    data["detectors"][0].update(bins=8_000, angle_bins=8_000)
    from raytrace.scene_io import scene_from_dict
    reports = detector_reports(raytrace.trace(scene_from_dict(data), rays=200))
    pipe = raytrace.trace(load_scene(PIPE), rays=60, record="all")
    monkeypatch.setattr(rt, "CSV_BLOCK_ROWS", 200)

    def peak(fn) -> int:
        tracemalloc.start()
        fn()
        top = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        return top

    class Sink(io.TextIOBase):
        def write(self, s):
            return len(s)
    streamed = peak(lambda: rt.write_rows(pipe, Sink()))
    whole = peak(lambda: rt.ray_table(pipe).to_csv())
    assert streamed < whole / 4
    import raytrace.detectors as det
    real = det.profiles_rows
    monkeypatch.setattr(det, "profiles_rows", lambda reports: real(reports, block=400))
    streamed = peak(lambda: write_profiles(reports, Sink()))
    whole = peak(lambda: list(profiles_rows(reports)))
    assert streamed < whole / 4


def test_detector_bins_beyond_the_limit_stop_before_allocating(tmp_path, capsys):
    data = json.loads(WINDOW.read_text())
    for det in data["detectors"]:
        det.update(bins=1_000_000, angle_bins=1_000_000)    # 4 million bins: 32 MB a copy
    p = tmp_path / "fine.json"
    p.write_text(json.dumps(data))
    code, _, err = run(["trace", p, "--max-memory-mb", "50", "--workers", "1", "--quiet"], capsys)
    assert code == cli.EXIT_LIMIT
    assert "the detectors' 4,000,000 profile bins need about 256 MB" in err and "--max-memory-mb" in err


def test_a_failed_in_place_save_of_a_hard_linked_file_keeps_the_new_content_beside_it(scene_file, tmp_path,
                                                                                       monkeypatch):
    import raytrace.atomic as atomic
    os.link(scene_file, tmp_path / "other.json")
    scene = load_scene(scene_file)
    scene.name = "the new content"

    def disk_full(*_a, **_k):
        raise OSError(28, "No space left on device")
    monkeypatch.setattr(atomic.shutil, "copyfileobj", disk_full)
    with pytest.raises(OSError, match=r"No space left on device; the new content is in .*s\.json\.new"):
        save_scene(scene, scene_file)
    monkeypatch.undo()
    assert load_scene(scene_file.with_name("s.json.new")).name == "the new content"


def test_a_file_name_that_is_not_utf8_prints_escaped(tmp_path):
    import subprocess
    name = os.fsdecode(b"scene\xff.json")          # a byte no UTF-8 text has
    shutil.copy(WINDOW, tmp_path / name)
    run_ = subprocess.run([sys.executable, "-m", "raytrace.cli", "check", name], cwd=tmp_path,
                          capture_output=True, env={**os.environ, "PYTHONIOENCODING": "utf-8"})
    assert run_.returncode == cli.EXIT_OK, run_.stderr
    assert run_.stdout.decode("utf-8").startswith("scene\\udcff.json: ok")


@pytest.mark.parametrize("args", [
    ["trace", "{scene}", "--rays", "20", "--json", "{out}", "--plot", "{out}"],
    ["sweep", "{scene}", "--vary", "probe beam.direction_deg=40,50", "--rays", "20", "--csv", "{out}", "--plot", "{out}"],
])
def test_a_plot_on_the_file_of_another_output_is_refused(scene_file, tmp_path, capsys, args):
    """--plot out.svg beside --json out.svg (or a sweep's --csv out.png): one silently replaced the
    other after the run; now it is refused before tracing, naming both."""
    out = tmp_path / "out.svg"
    code, _, err = run([a.format(scene=scene_file, out=out) for a in args], capsys)
    assert code == cli.EXIT_USAGE and not out.exists()
    assert f"{out}: found the same file as" in err and "--plot" in err
