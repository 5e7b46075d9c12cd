"""One clear line per user error: no doubled prefix, and a fit error names its file."""

import numpy as np

from benchfit.cli import main


def test_parser_errors_have_one_prefix(capsys):
    assert main(["demo", "--bogus"]) == 2
    err = capsys.readouterr().err.strip()
    assert err == "benchfit: error: unrecognized arguments: --bogus"
    assert main(["fit"]) == 2
    err = capsys.readouterr().err.strip()
    assert err == "benchfit: error: fit: the following arguments are required: SWEEP"


def test_fit_error_names_the_file(tmp_path, capsys):
    f = np.geomspace(10, 1e5, 50)
    p = tmp_path / "flat.csv"
    p.write_text("freq,db,deg\n" + "".join(f"{x:.6g},3.0,0.0\n" for x in f))
    assert main(["fit", str(p)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"benchfit: error: {p}: ") and "constant" in err[0], err


def test_demo_takes_o_like_every_command(tmp_path, capsys):
    assert main(["demo", "-o", str(tmp_path / "out"), "--read-only", "--json"]) == 0
