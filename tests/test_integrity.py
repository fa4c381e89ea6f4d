"""What the engine leaves on disk: whole files, verified models, one run per output folder.

Fault cases: a model folder mixing two fits, truncated, extra and missing model
files, an edited or older model.json, writers killed at random moments and
between the two renames of a swap, a rerun into a used folder, stale files of
another run, and two writers at once.
"""

from __future__ import annotations

import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import ROOT
from vinstrata import folders, pipeline
from vinstrata.config import load_config, with_overrides
from vinstrata.demo import generate_demo, write_demo
from vinstrata.errors import InputError
from vinstrata.folders import LOCK_NAME, Identity, OutputFolder, atomic_path
from vinstrata.read.validate import load_lots
from vinstrata.segment.fit import fit_styles
from vinstrata.segment.model import load_model, save_model
from vinstrata.tables import write_csv

CONFIG = ROOT / "configs" / "demo.toml"
# the kill and lock tests fork writers, stop processes and rely on flock
posix_only = pytest.mark.skipif(not hasattr(os, "fork"), reason="POSIX processes and signals")
ENV = {**os.environ, "PYTHONPATH": os.pathsep.join([str(ROOT / "src"),
                                                     os.environ.get("PYTHONPATH", "")])}


def _debris(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith(".vinstrata-"))


def _one_error_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), err
    return lines[0]


def _dead_pid() -> int:
    done = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    return int(done.stdout)


@pytest.fixture(scope="module")
def small(tmp_path_factory) -> dict[str, Path]:
    """A small demo range: 400 lots, 10 new lots, no faulty rows."""
    folder = tmp_path_factory.mktemp("small")
    return write_demo(folder, generate_demo(n_lots=400, n_new=10, bad_rows=0))


@pytest.fixture(scope="module")
def fits(small, tmp_path_factory) -> dict[str, object]:
    """Two fits of the small range (seeds 1 and 4), each saved in its own folder."""
    config = load_config(str(CONFIG))
    table = load_lots(str(small["lots"]), config)
    root = tmp_path_factory.mktemp("fits")
    out: dict[str, object] = {}
    for key, seed in (("a", 1), ("b", 4)):
        model = fit_styles(table, with_overrides(config, seed=seed))
        folder = save_model(model, root / key / "model")
        out[key] = model
        out[f"{key}_dir"] = folder
        out[f"{key}_fp"] = load_model(folder).fingerprint
    assert out["a_fp"] != out["b_fp"]
    return out


def _copy(folder: Path, where: Path) -> Path:
    target = where / "model"
    shutil.copytree(folder, target)
    return target


# --------------------------------------------------------------------------- verified model


def test_model_json_lists_every_file_and_the_same_model_gives_the_same_bytes(fits, tmp_path):
    folder = fits["a_dir"]
    meta = json.loads((folder / "model.json").read_text())
    on_disk = sorted(p.name for p in folder.iterdir() if p.name != "model.json")
    assert sorted(meta["files"]) == on_disk and meta["format_version"] == 1
    for name, entry in meta["files"].items():
        assert entry == folders.file_entry(folder / name), name
    again = save_model(fits["a"], tmp_path / "model")
    for name in [*on_disk, "model.json"]:
        assert (again / name).read_bytes() == (folder / name).read_bytes(), name
    assert load_model(again).fingerprint == folders.sha256_file(folder / "model.json")



def test_a_loaded_model_saved_again_keeps_its_bytes_and_its_fingerprint(fits, tmp_path):
    # a model rewritten after loading (to store a style's user name, say) must not
    # turn into "another run" by a change of text dtype alone
    again = save_model(load_model(fits["a_dir"]), tmp_path / "model")
    for path in sorted(fits["a_dir"].iterdir()):
        assert (again / path.name).read_bytes() == path.read_bytes(), path.name
    assert load_model(again).fingerprint == fits["a_fp"]

def test_mixed_model_is_refused_naming_the_folder_and_the_first_file(fits, small, tmp_path,
                                                                     run_cli):
    # what a refit killed between writing model.json and the data files used to leave
    mixed = _copy(fits["a_dir"], tmp_path)
    shutil.copy(fits["b_dir"] / "model.json", mixed / "model.json")
    first = next(p.name for p in sorted(mixed.iterdir()) if p.name != "model.json"
                 and p.read_bytes() != (fits["b_dir"] / p.name).read_bytes())
    with pytest.raises(InputError, match=rf"model file {first} (differs from|holds)"):
        load_model(mixed)
    for command in (["profile"], ["place", small["new_lots"]]):
        result = run_cli(*command, "--model", mixed, "--out", tmp_path / "out")
        assert result.code == 2, result
        line = _one_error_line(result.err)
        assert str(mixed) in line and first in line and "segment" in line
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("name", ["lots.parquet", "space.npy"])
def test_truncated_model_file_is_refused(fits, tmp_path, name):
    folder = _copy(fits["a_dir"], tmp_path)
    data = (folder / name).read_bytes()
    (folder / name).write_bytes(data[: len(data) // 2])
    with pytest.raises(InputError, match=rf"{name} holds {len(data) // 2} bytes, model.json "
                                         rf"lists {len(data)}"):
        load_model(folder)


@pytest.mark.parametrize(("change", "message"), [
    ("extra", r"model file notes\.txt is not listed in model\.json"),
    ("missing", r"model file memberships\.npy is missing"),
    ("edited", r"model\.json: changed after it was written"),
    ("older", r"written by an older vinstrata .* run 'vinstrata segment' again"),
    ("version", r"model format version 999"),
])
def test_model_folder_with_a_file_too_many_or_too_few_or_edited_is_refused(
        fits, tmp_path, change, message):
    folder = _copy(fits["a_dir"], tmp_path)
    meta = json.loads((folder / "model.json").read_text())
    if change == "extra":
        (folder / "notes.txt").write_text("mine")
    elif change == "missing":
        (folder / "memberships.npy").unlink()
    elif change == "edited":
        meta["outliers"]["edited"] = True
    elif change == "older":
        del meta["files"], meta["checksum"]
    else:
        meta["format_version"] = 999
    if change in ("edited", "older", "version"):
        (folder / "model.json").write_text(json.dumps(meta))
    with pytest.raises(InputError, match=message) as caught:
        load_model(folder)
    assert str(folder) in str(caught.value) and "\n" not in str(caught.value)


def test_hidden_files_of_a_file_browser_do_not_spoil_a_model(fits, tmp_path):
    folder = _copy(fits["a_dir"], tmp_path)
    (folder / ".DS_Store").write_bytes(b"\0\0")
    assert load_model(folder).fingerprint == fits["a_fp"]


# --------------------------------------------------------------------------- swaps cut short

KILL_BETWEEN_RENAMES = """
import os, signal, sys
from vinstrata.segment.model import load_model, save_model
new = load_model(sys.argv[1])
rename = os.rename
def cut(src, dst):
    rename(src, dst)
    if ".vinstrata-old-" in str(dst):  # the old model is aside, the new one not yet in
        os.kill(os.getpid(), signal.SIGKILL)
os.rename = cut
save_model(new, sys.argv[2])
"""


@posix_only
def test_writer_killed_between_the_two_renames_leaves_a_loadable_old_model(fits, tmp_path):
    target = save_model(fits["a"], tmp_path / "model")
    child = subprocess.run([sys.executable, "-c", KILL_BETWEEN_RENAMES, str(fits["b_dir"]),
                            str(target)], env=ENV, capture_output=True, timeout=120)
    assert child.returncode == -signal.SIGKILL, child.stderr
    assert not target.exists() and any(".vinstrata-old-" in n for n in _debris(tmp_path))
    assert load_model(target).fingerprint == fits["a_fp"]  # put back by the reader
    save_model(fits["b"], target)
    assert load_model(target).fingerprint == fits["b_fp"] and _debris(tmp_path) == []


def test_ctrl_c_between_the_two_renames_puts_the_old_model_back(fits, tmp_path, monkeypatch):
    target = save_model(fits["a"], tmp_path / "model")
    rename = os.rename

    def interrupted(src, dst):
        if ".vinstrata-new-" in str(src):
            raise KeyboardInterrupt
        rename(src, dst)

    monkeypatch.setattr(folders.os, "rename", interrupted)
    with pytest.raises(KeyboardInterrupt):
        save_model(fits["b"], target)
    monkeypatch.undo()
    assert load_model(target).fingerprint == fits["a_fp"] and _debris(tmp_path) == []


SAVE_SERVER = """
import os, sys
from vinstrata.segment.model import load_model, save_model
models = {"old": load_model(sys.argv[1]), "new": load_model(sys.argv[2])}
progress = os.open(sys.argv[4], os.O_WRONLY | os.O_APPEND | os.O_CREAT)
print("ready", flush=True)
for line in sys.stdin:  # "<first model>": fork a writer that saves in a loop until killed
    first = line.strip()
    order = [first, "old" if first == "new" else "new"]
    pid = os.fork()
    if pid == 0:
        n = 0
        while True:
            save_model(models[order[n % 2]], sys.argv[3])
            os.write(progress, b".")
            n += 1
    print(pid, flush=True)
    sys.stdin.readline()  # killed: reap it, so that its pid is gone
    print(os.waitpid(pid, 0)[1], flush=True)
"""


@posix_only
def test_refit_killed_at_random_moments_leaves_the_old_or_the_new_model(fits, tmp_path):
    # the writers save what they loaded: the bytes of a model saved after loading
    fingerprints = {}
    for key, label in (("a_dir", "old"), ("b_dir", "new")):
        saved = save_model(load_model(fits[key]), tmp_path / "reference" / key)
        fingerprints[load_model(saved).fingerprint] = label
    target = save_model(load_model(fits["a_dir"]), tmp_path / "model")
    progress = tmp_path / "saves"
    # one process pays the imports once and forks a fresh writer for every kill
    server = subprocess.Popen(
        [sys.executable, "-c", SAVE_SERVER, str(fits["a_dir"]), str(fits["b_dir"]), str(target),
         str(progress)], env=ENV, stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    delays = [0.0, 0.01, 0.03, 0.06, 0.1, 0.15, 0.21, 0.28, 0.36, 0.45]
    random.Random(11).shuffle(delays)
    seen, state = [], "old"
    try:
        assert server.stdout.readline().strip() == "ready"
        for delay in delays:
            # each writer starts with the model the folder does not hold
            server.stdin.write(("new" if state == "old" else "old") + "\n")
            server.stdin.flush()
            writer = int(server.stdout.readline())
            time.sleep(delay)
            os.kill(writer, signal.SIGKILL)
            server.stdin.write("reap\n")
            server.stdin.flush()
            assert int(server.stdout.readline()) == signal.SIGKILL  # killed, never failed
            model = load_model(target)
            assert model.fingerprint in fingerprints, delay
            assert len(model.lots) == len(fits["a"].lots)
            state = fingerprints[model.fingerprint]
            seen.append((delay, state, [n.split("-")[1] for n in _debris(tmp_path)]))
    finally:
        server.kill()
        server.wait()
    print("kills (delay, model found, debris kinds):", *seen, sep="\n  ")
    assert progress.stat().st_size > 0  # the writers did save between the kills
    save_model(fits["b"], target)
    assert _debris(tmp_path) == [] and load_model(target).fingerprint == fits["b_fp"]


CSV_SERVER = """
import os, sys
import numpy as np, pandas as pd
from vinstrata.tables import write_csv
frame = pd.DataFrame(np.arange(600000, dtype=float).reshape(-1, 4) / 7, columns=list("abcd"))
print("ready", flush=True)
for line in sys.stdin:  # fork a writer that rewrites the table until killed
    pid = os.fork()
    if pid == 0:
        while True:
            write_csv(frame, sys.argv[1])
    print(pid, flush=True)
    sys.stdin.readline()
    print(os.waitpid(pid, 0)[1], flush=True)
"""


@posix_only
def test_killed_csv_write_leaves_the_whole_old_file_and_no_debris(tmp_path):
    target = tmp_path / "lot_styles.csv"
    frame = pd.DataFrame(np.arange(600000, dtype=float).reshape(-1, 4) / 7, columns=list("abcd"))
    whole = write_csv(frame, tmp_path / "expected.csv").read_bytes()
    server = subprocess.Popen([sys.executable, "-c", CSV_SERVER, str(target)], env=ENV,
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert server.stdout.readline().strip() == "ready"
        for delay in (0.05, 0.2, 0.45, 0.7):
            server.stdin.write("go\n")
            server.stdin.flush()
            writer = int(server.stdout.readline())
            time.sleep(delay)
            os.kill(writer, signal.SIGKILL)
            server.stdin.write("reap\n")
            server.stdin.flush()
            assert int(server.stdout.readline()) == signal.SIGKILL
            assert not target.exists() or target.read_bytes() == whole
    finally:
        server.kill()
        server.wait()
    write_csv(frame, target)
    assert target.read_bytes() == whole and _debris(tmp_path) == []


def test_interrupted_write_keeps_the_old_file(tmp_path):
    target = tmp_path / "drivers.csv"
    target.write_text("old\n")
    with pytest.raises(KeyboardInterrupt), atomic_path(target) as temp:
        temp.write_text("half a ta")
        raise KeyboardInterrupt
    assert target.read_text() == "old\n" and _debris(tmp_path) == []


def test_files_written_together_change_together(fits, tmp_path):
    styles = tmp_path / "styles.csv"
    write_csv(pd.DataFrame({"style": ["S1"]}), styles)
    save_model(fits["a"], tmp_path / "model")
    with pytest.raises(KeyboardInterrupt), folders.held_back():
        write_csv(pd.DataFrame({"style": ["S2"]}), styles)
        save_model(fits["b"], tmp_path / "model")
        assert styles.read_text() == "style\nS1\n"  # nothing in place before the end
        raise KeyboardInterrupt
    assert styles.read_text() == "style\nS1\n" and _debris(tmp_path) == []
    assert load_model(tmp_path / "model").fingerprint == fits["a_fp"]
    with folders.held_back():
        write_csv(pd.DataFrame({"style": ["S2"]}), styles)
        save_model(fits["b"], tmp_path / "model")
    assert styles.read_text() == "style\nS2\n" and _debris(tmp_path) == []
    assert load_model(tmp_path / "model").fingerprint == fits["b_fp"]


# --------------------------------------------------------------------------- output folders


def _manifests(folder: Path) -> dict[str, dict]:
    return {p.name: json.loads(p.read_text()) for p in sorted(folder.glob("*_manifest.json"))}


def _segment_into(folder: Path, model, table) -> None:
    """What ``vinstrata segment`` writes, without fitting again."""
    with OutputFolder(folder, "segment") as held:
        written = [*pipeline.write_check(table, folder), *pipeline.write_segment(model, folder)]
        held.commit(pipeline.run_identity(model, folder / "model"), written)


def test_commands_of_one_run_share_a_folder_and_another_run_clears_them(
        fits, small, tmp_path, run_cli):
    work = tmp_path / "work"
    table = load_lots(str(small["lots"]), load_config(str(CONFIG)))
    _segment_into(work, fits["a"], table)
    assert run_cli("-q", "profile", "--model", work / "model", "--out", work).code == 0
    assert run_cli("-q", "place", small["new_lots"], "--model", work / "model",
                   "--out", work).code == 0
    assert run_cli("-q", "brief", "--model", work / "model", "--profiles", work,
                   "--placements", work, "--out", work / "briefing.pdf").code == 0
    (work / "notes.txt").write_text("my own file")
    manifests = _manifests(work)
    assert set(manifests) == {"segment_manifest.json", "profile_manifest.json",
                              "place_manifest.json", "brief_manifest.json"}
    identities = {json.dumps(m["identity"], sort_keys=True) for m in manifests.values()}
    assert len(identities) == 1 and fits["a_fp"] in identities.pop()
    for name, manifest in manifests.items():
        for key, entry in manifest["files"].items():
            if not key.endswith("/"):
                listed = {k: entry[k] for k in ("sha256", "size")}
                assert listed == folders.file_entry(work / key), (name, key)
    assert "drivers.csv" in manifests["profile_manifest.json"]["files"]
    assert "placements.csv" in manifests["place_manifest.json"]["files"]

    # another run's model cannot be profiled into this folder: that would mix two runs
    other = tmp_path / "other"
    _segment_into(other, fits["b"], table)
    result = run_cli("-q", "profile", "--model", other / "model", "--out", work)
    assert result.code == 2
    line = _one_error_line(result.err)
    assert str(work) in line and "model/ of another run" in line

    # segmenting again with another seed: the old run's profile and placements go
    _segment_into(work, fits["b"], table)
    left = sorted(p.name for p in work.iterdir())
    assert not [n for n in left if n.startswith(("drivers", "placement", "thresholds",
                                                  "briefing"))], left
    assert "notes.txt" in left and LOCK_NAME not in left
    assert set(_manifests(work)) == {"segment_manifest.json"}
    assert load_model(work / "model").fingerprint == fits["b_fp"]


def test_rerun_into_a_used_folder_leaves_files_of_one_run_only(small, tmp_path, run_cli):
    out = tmp_path / "R"
    first = run_cli("-q", "run", small["lots"], "--new", small["new_lots"], "--config", CONFIG,
                    "--out", out)
    assert first.code == 0, first
    assert (out / "placements.csv").exists() and (out / "placement_details.csv").exists()
    (out / "notes.txt").write_text("my own file")
    second = run_cli("-q", "run", small["lots"], "--config", CONFIG, "--out", out,
                     "--seed", "9")
    assert second.code == 0, second
    names = sorted(p.name for p in out.iterdir())
    assert not [n for n in names if n.startswith("placement")], names
    assert "notes.txt" in names and "briefing.pdf" in names
    assert [n for n in names if n.startswith(".")] == []
    manifest = json.loads((out / "run_manifest.json").read_text())
    assert set(_manifests(out)) == {"run_manifest.json"}
    assert manifest["identity"]["model"] == load_model(out / "model").fingerprint
    assert manifest["identity"]["seed"] == 9
    listed = {key.rstrip("/") for key in manifest["files"]}
    assert listed == set(names) - {"notes.txt", "run_manifest.json"}


def test_brief_records_each_pdf_with_its_own_run_and_removes_nothing(tmp_path):
    shelf = tmp_path / "shelf"
    for name, model in (("a.pdf", "a" * 64), ("b.pdf", "b" * 64)):
        with OutputFolder(shelf, "brief") as held:
            pdf = folders.write_bytes(shelf / name, b"%PDF-1.4 " + name.encode())
            held.commit(Identity(input_sha256="0" * 64, seed=1, model=model), [pdf],
                        replace="none")
    manifest = json.loads((shelf / "brief_manifest.json").read_text())
    assert sorted(manifest["files"]) == ["a.pdf", "b.pdf"]
    assert [manifest["files"][n]["identity"]["model"][0] for n in ("a.pdf", "b.pdf")] == ["a", "b"]
    assert sorted(p.name for p in shelf.iterdir()) == ["a.pdf", "b.pdf", "brief_manifest.json"]


def test_a_manifest_never_leads_removal_out_of_its_folder(tmp_path):
    (tmp_path / "outside.csv").write_text("keep")
    work = tmp_path / "work"
    work.mkdir()
    (work / "old.csv").write_text("of another run")
    (work / "x_manifest.json").write_text(json.dumps({
        "manifest_version": 1, "command": "x", "identity": {"input_sha256": "a", "model": "m1"},
        "files": {"../outside.csv": {}, str(tmp_path / "outside.csv"): {}, "old.csv": {}}}))
    with OutputFolder(work, "profile") as held:
        drivers = folders.write_bytes(work / "drivers.csv", b"style\n")
        held.commit(Identity(input_sha256="a", model="m2"), [drivers])
    assert (tmp_path / "outside.csv").read_text() == "keep"
    assert sorted(p.name for p in work.iterdir()) == ["drivers.csv", "profile_manifest.json"]


# --------------------------------------------------------------------------- two writers


@posix_only
def test_second_writer_is_refused_and_a_dead_owners_lock_taken_over(tmp_path):
    folder = tmp_path / "W"
    busy = rf"another vinstrata command \(segment, pid {os.getpid()} on .*\) is writing"
    with OutputFolder(folder, "segment"), pytest.raises(InputError, match=busy):
        OutputFolder(folder, "profile").__enter__()
    assert not folder.exists()  # made for the command, left empty, removed again
    folder.mkdir()
    (folder / LOCK_NAME).write_text(json.dumps({"command": "segment", "pid": _dead_pid()}))
    with OutputFolder(folder, "profile"):
        owner = json.loads((folder / LOCK_NAME).read_text())
        assert owner["pid"] == os.getpid() and owner["command"] == "profile"
    assert not (folder / LOCK_NAME).exists()


@posix_only
def test_two_segment_runs_into_one_folder(small, tmp_path):
    out = tmp_path / "W"
    command = [sys.executable, "-m", "vinstrata", "-q", "segment", str(small["lots"]),
               "--config", str(CONFIG), "--out", str(out)]
    first = subprocess.Popen(command, env=ENV, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                             text=True)
    try:
        deadline = time.monotonic() + 60
        while not (out / LOCK_NAME).exists() and first.poll() is None:
            assert time.monotonic() < deadline, "the first segment never took its folder"
            time.sleep(0.02)
        # hold the first one inside its work, so the second surely meets it
        first.send_signal(signal.SIGSTOP)
        second = subprocess.run(command, env=ENV, capture_output=True, text=True, timeout=120)
    finally:
        first.send_signal(signal.SIGCONT)
    _, err_text = first.communicate(timeout=180)
    assert first.returncode == 0, err_text
    assert second.returncode == 2, second.stderr
    line = _one_error_line(second.stderr)
    assert str(out) in line and f"pid {first.pid}" in line and "segment" in line
    model = load_model(out / "model")
    assert len(model.lots) == 400
    assert set(_manifests(out)) == {"segment_manifest.json"}
    assert not (out / LOCK_NAME).exists() and _debris(out) == []
