"""Plant paths in a TOML design file resolve against the file's own folder and never leave it.

A design file can come from a colleague's disk; it must not make benchfit read
files elsewhere (absolute paths, '..' escapes, FILE@TRACE tricks).
"""

import os

import pytest

from benchfit.errors import InputError
from benchfit.loop.designfile import read_design_file


def _design(folder, files):
    p = folder / "design.toml"
    p.write_text("[plant]\nfiles = [" + ", ".join(f'"{f}"' for f in files) + "]\n", encoding="utf-8")
    return p


def test_relative_paths_resolve_against_the_design_file(tmp_path, monkeypatch):
    (tmp_path / "plants").mkdir()
    elsewhere = tmp_path / "cwd"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)  # the working folder must not matter
    spec = read_design_file(_design(tmp_path, ["plants/buck.json", "two.csv@light"]))
    assert spec.plant_files == (str(tmp_path / "plants" / "buck.json"), str(tmp_path / "two.csv@light"))


@pytest.mark.parametrize("name", [
    "/etc/passwd",
    "../outside.json",
    "plants/../../outside.json",
    "../outside.csv@1",
    "ok@/../../../etc/passwd",
])
def test_paths_leaving_the_folder_are_refused(tmp_path, name):
    inner = tmp_path / "inner"
    inner.mkdir()
    (tmp_path / "outside.json").write_text("{}", encoding="utf-8")
    with pytest.raises(InputError) as e:
        read_design_file(_design(inner, [name]))
    assert "design file" in str(e.value) and "design.toml" in str(e.value)


def test_symlink_out_of_the_folder_is_refused(tmp_path):
    inner = tmp_path / "inner"
    inner.mkdir()
    (tmp_path / "secret.json").write_text("{}", encoding="utf-8")
    os.symlink(tmp_path / "secret.json", inner / "link.json")
    with pytest.raises(InputError, match="outside"):
        read_design_file(_design(inner, ["link.json"]))


def test_a_folder_as_design_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="folder"):
        read_design_file(tmp_path)
