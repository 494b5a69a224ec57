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
    assert sorted(p.suffix for p in fw.iterdir()) == [".c", ".h", ".json"]   # the .image.json for upload-pid
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
