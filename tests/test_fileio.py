"""Safe writing at the edges: atomic, never overwriting unless asked, output folders made on demand."""

import pytest

from compensator.errors import InputError
from compensator.fileio import output_dir, write_file_atomic


def test_write_never_overwrites_unless_asked(tmp_path):
    path = tmp_path / "a.txt"
    write_file_atomic(path, "one\n")
    with pytest.raises(InputError, match="already exists"):
        write_file_atomic(path, "two\n")
    assert path.read_text() == "one\n"
    write_file_atomic(path, b"three\n", overwrite=True)
    assert path.read_bytes() == b"three\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.txt"]  # no temporary files left behind


def test_write_into_missing_folder_is_a_clean_error(tmp_path):
    with pytest.raises(InputError, match="cannot write"):
        write_file_atomic(tmp_path / "missing" / "a.txt", "x")


def test_output_dir_creates_parents_and_rejects_files(tmp_path):
    made = output_dir(tmp_path / "x" / "y", "plot")
    assert made.is_dir()
    (tmp_path / "file").write_text("")
    with pytest.raises(InputError, match="not a directory"):
        output_dir(tmp_path / "file", "plot")


def test_commands_create_their_output_folders(cli, profiles_dir, tmp_path):
    fw = tmp_path / "new" / "fw"
    r = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "simc", "--emit-c", fw,
            "--plot", tmp_path / "new" / "figs")
    assert r.status == 0, r.stderr
    assert sorted(p.suffix for p in fw.iterdir()) == [".c", ".h"]
    assert any((tmp_path / "new" / "figs").iterdir())
    (tmp_path / "taken").write_text("")
    r = cli("tune", "--plant", profiles_dir / "hut-cooler.yaml", "--method", "simc", "--emit-c", tmp_path / "taken")
    assert r.status == 2 and "not a directory" in r.stderr and r.stderr.count("compensator: ") >= 1


def test_file_sets_are_all_or_nothing(tmp_path):
    from compensator.fileio import write_files_atomic

    (tmp_path / "b.c").write_text("keep")
    with pytest.raises(InputError, match="b.c: already exists"):
        write_files_atomic(tmp_path, {"a.h": "1", "b.c": "2"})
    assert not (tmp_path / "a.h").exists() and (tmp_path / "b.c").read_text() == "keep"
    # A write that fails half-way removes what this call created.
    with pytest.raises(InputError, match="cannot write"):
        write_files_atomic(tmp_path / "sub", {"a.txt": "1", "missing/c.txt": "2"})  # no folder for the second
    assert not (tmp_path / "sub" / "a.txt").exists()
    assert [p.name for p in write_files_atomic(tmp_path / "new", {"x": "1", "y": b"2"})] == ["x", "y"]


class _Interrupting:
    """Content whose conversion to bytes is interrupted (as by Ctrl-C or SIGTERM half-way through a set)."""

    def __init__(self, signal_number=None):
        self.signal_number = signal_number

    def __bytes__(self):
        if self.signal_number is None:
            raise KeyboardInterrupt
        import os

        os.kill(os.getpid(), self.signal_number)
        return b"never reached"


@pytest.mark.parametrize("signal_number", [None, 15], ids=["ctrl-c", "sigterm"])
def test_an_interrupted_set_leaves_nothing_behind(tmp_path, signal_number):
    from compensator.fileio import write_file_set

    with pytest.raises(KeyboardInterrupt):
        write_file_set({tmp_path / "out" / "a.h": "1" * 10_000, tmp_path / "out" / "sub" / "b.c": "2",
                        tmp_path / "out" / "sweep.csv": _Interrupting(signal_number)})
    assert list(tmp_path.iterdir()) == []  # no file, no temporary, no folder made for the set


def test_files_are_renamed_together_only_when_all_are_written(tmp_path, monkeypatch):
    import os

    from compensator.fileio import write_file_set

    seen = []
    real_link = os.link

    def link(src, dst):
        seen.append(sorted(p.name for p in tmp_path.iterdir()))
        return real_link(src, dst)

    monkeypatch.setattr(os, "link", link)
    write_file_set({tmp_path / "a.h": "1", tmp_path / "b.c": "2"})
    # When the first rename happens, both temporaries exist already.
    assert len(seen[0]) == 2 and all(name.endswith(".tmp") for name in seen[0])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.h", "b.c"]


@pytest.mark.parametrize("umask, mode", [(0o022, 0o644), (0o077, 0o600), (0o002, 0o664)])
def test_written_files_respect_the_umask(tmp_path, umask, mode):
    import os

    old = os.umask(umask)
    try:
        path = write_file_atomic(tmp_path / "a.txt", "x")
    finally:
        os.umask(old)
    assert path.stat().st_mode & 0o777 == mode


def test_every_target_is_checked_before_anything_is_written(tmp_path):
    from compensator.fileio import write_file_set

    (tmp_path / "taken.c").write_text("keep")
    (tmp_path / "folder.h").mkdir()
    (tmp_path / "plain").write_text("")
    with pytest.raises(InputError) as err:
        write_file_set({tmp_path / "new.txt": "1", tmp_path / "taken.c": "2", tmp_path / "folder.h": "3",
                        tmp_path / "plain" / "x.csv": "4"})
    lines = str(err.value).splitlines()
    assert len(lines) == 3
    assert "taken.c: already exists" in lines[0] and "folder.h: is a directory" in lines[1]
    assert "plain: is not a directory" in lines[2]
    assert not (tmp_path / "new.txt").exists() and (tmp_path / "taken.c").read_text() == "keep"


def test_a_full_device_is_one_line_and_leaves_nothing(tmp_path, monkeypatch):
    import errno
    import os

    from compensator.fileio import write_file_set

    calls = []
    real_fsync = os.fsync

    def fsync(fd):  # the second file meets a full device
        calls.append(fd)
        if len(calls) == 2:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real_fsync(fd)

    monkeypatch.setattr(os, "fsync", fsync)
    with pytest.raises(InputError, match="b.c: cannot write: No space left on device") as err:
        write_file_set({tmp_path / "out" / "a.h": "1", tmp_path / "out" / "b.c": "2"})
    assert str(err.value).count("\n") == 0
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("text, reason", [
    ('{"scans": [' * 5000 + "]" * 5000 + "}", "nested deeper than 32 levels"),
    ('{"curves": [{"temp_c": 1' + "0" * 5000 + "}]}", "a number of 5001 characters"),
    ('{"curves": [{"temp_c": NaN}]}', "NaN is not a number JSON allows"),
    ('{"curves": [\n{"temp_c": 1,}]}', ":2: invalid JSON"),
    ("[" * 40 + "]" * 40, "nested deeper than 32 levels"),
])
def test_hostile_json_is_one_located_line(tmp_path, text, reason):
    from compensator.fileio import loads_json

    with pytest.raises(InputError) as err:
        loads_json(text, file="scan.json")
    assert reason in str(err.value) and str(err.value).startswith("scan.json") and "\n" not in str(err.value)


def test_commands_reading_json_refuse_hostile_documents(cli, tmp_path):
    deep = tmp_path / "deep.json"
    deep.write_text('{"scans": [' * 100_000 + "]" * 100_000 + "}")
    digits = tmp_path / "digits.json"
    digits.write_text('{"scans": [{"temp_c": 1' + "0" * 5000 + ', "breakdown_v": 24.5}]}')
    for path in (deep, digits):
        result = cli("calibrate", "tempco", path)
        assert result.status == 2 and result.stderr.count("\n") == 1 and str(path) in result.stderr
