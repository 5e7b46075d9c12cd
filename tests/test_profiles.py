"""Instrument profiles: shipped ones validate, errors name the key, search path order."""

import tomllib
from pathlib import Path

import pytest

from benchfit.bench.profile import (
    SHIPPED_DIR,
    Profile,
    find_profile,
    list_profiles,
    load_profile_file,
    parse_profile,
)
from benchfit.errors import InputError


def _raw(name="generic-analyzer"):
    return tomllib.loads((SHIPPED_DIR / f"{name}.toml").read_text())


@pytest.mark.parametrize("name,kind", [("generic-analyzer", "analyzer"), ("generic-scope", "scope")])
def test_shipped_profiles_validate(name, kind):
    p = find_profile(name)
    assert p.kind == kind and p.name == name
    assert p.command("identify") == "*IDN?"
    assert p.command("error_query") == "SYSTem:ERRor?"


def test_command_placeholders_filled_with_12_digits():
    p = find_profile("generic-analyzer")
    assert p.command("start", start_hz=10.0) == "SENSe:FREQuency:STARt 10"
    assert p.command("cw", freq_hz=1234.56789012345) == "SOURce:FREQuency:CW 1234.56789012"
    assert p.command("points", points=201) == "SENSe:SWEep:POINts 201"


def test_round_trip_dict():
    p = find_profile("generic-scope")
    q = Profile.from_dict(p.to_dict())
    assert q == p


@pytest.mark.parametrize("mutate,key", [
    (lambda r: r["commands"].__setitem__("sweep_tyep", "X"), "commands.sweep_tyep"),
    (lambda r: r["connection"].__setitem__("timeout", 3), "connection.timeout"),
    (lambda r: r.__setitem__("colour", "red"), "'colour'"),
    (lambda r: r["commands"].pop("data_query"), "commands.data_query"),
    (lambda r: r["commands"].pop("trigger"), "commands.trigger"),
    (lambda r: r["data"].__setitem__("encoding", "real16"), "data.encoding"),
    (lambda r: r["data"].__setitem__("byte_order", "middle"), "data.byte_order"),
    (lambda r: r["data"].__setitem__("response_form", "polar"), "data.response_form"),
    (lambda r: r["data"].__setitem__("encoding", "int16"), "data.encoding"),
    (lambda r: r["connection"].__setitem__("timeout_s", "ten"), "connection.timeout_s"),
    (lambda r: r["connection"].__setitem__("timeout_s", -1.0), "connection.timeout_s"),
    (lambda r: r["connection"].__setitem__("retries", True), "connection.retries"),
    (lambda r: r["connection"].__setitem__("complete_timeout_s", 0), "connection.complete_timeout_s"),
    (lambda r: r["commands"].__setitem__("start", "FREQ:STAR {stop_hz}"), "commands.start"),
    (lambda r: r["commands"].__setitem__("start", "FREQ:STAR {start_hz"), "commands.start"),
    (lambda r: r.__setitem__("kind", "meter"), "kind"),
    (lambda r: r.pop("name"), "'name'"),
    (lambda r: r.pop("commands"), "[commands]"),
])
def test_validation_errors_name_the_key(mutate, key):
    raw = _raw()
    mutate(raw)
    with pytest.raises(InputError) as info:
        parse_profile(raw, source="my.toml")
    assert key in str(info.value)
    assert "my.toml" in str(info.value)


def test_binary_encoding_needs_its_format_command():
    raw = _raw()
    raw["commands"].pop("format_real64")
    with pytest.raises(InputError, match="commands.format_real64"):
        parse_profile(raw)


def test_missing_optional_command_named_when_needed():
    raw = _raw()
    raw["commands"].pop("cw")
    p = parse_profile(raw)
    with pytest.raises(InputError, match=r"no \[commands\] cw \(needed for --mode step\)"):
        p.require("cw", "--mode step")


def test_bad_toml_reports_file(tmp_path):
    f = tmp_path / "broken.toml"
    f.write_text("name = 'x'\n[commands\n")
    with pytest.raises(InputError, match="not valid TOML") as info:
        load_profile_file(f)
    assert "broken.toml" in str(info.value)


def test_search_path_env_overrides_shipped(tmp_path, monkeypatch):
    raw = (SHIPPED_DIR / "generic-analyzer.toml").read_text()
    mine = raw.replace('description = "', 'description = "MINE ')
    (tmp_path / "generic-analyzer.toml").write_text(mine)
    (tmp_path / "bench-b.toml").write_text(raw.replace('name = "generic-analyzer"', 'name = "bench-b"'))
    monkeypatch.setenv("BENCHFIT_PROFILES", str(tmp_path))
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "nothing"))
    assert find_profile("generic-analyzer").description.startswith("MINE")
    assert find_profile("bench-b").name == "bench-b"
    entries = list_profiles()
    shipped = [e for e in entries if e.origin == "shipped" and e.name == "generic-analyzer"]
    assert shipped and shipped[0].shadowed
    with pytest.raises(InputError, match="no profile named 'nope'") as info:
        find_profile("nope")
    assert "bench-b" in str(info.value)


def test_user_config_folder(tmp_path, monkeypatch):
    folder = tmp_path / "benchfit" / "profiles"
    folder.mkdir(parents=True)
    raw = (SHIPPED_DIR / "generic-scope.toml").read_text()
    (folder / "my-scope.toml").write_text(raw.replace('name = "generic-scope"', 'name = "my-scope"'))
    monkeypatch.delenv("BENCHFIT_PROFILES", raising=False)
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path))
    assert find_profile("my-scope", kind="scope").kind == "scope"
    with pytest.raises(InputError, match="expected an analyzer profile"):
        find_profile("my-scope", kind="analyzer")


def test_profile_by_path(tmp_path):
    f = tmp_path / "x.toml"
    f.write_text((SHIPPED_DIR / "generic-analyzer.toml").read_text())
    assert find_profile(str(f)).source == str(f)


@pytest.mark.parametrize("placeholder", ["{start_hz:>999999999}", "{start_hz!r}", "{start_hz:.3f}",
                                         "{start_hz.__class__}", "{start_hz[0]}"])
def test_placeholders_are_plain_names(tmp_path, placeholder):
    # a format spec passed --check and then grew a capture's command to 9.8 GB
    from benchfit.bench.profile import load_profile_file

    src = (Path(__file__).resolve().parents[1] / "benchfit" / "bench" / "profiles"
           / "generic-analyzer.toml").read_text(encoding="utf-8")
    assert "{start_hz}" in src
    bad = tmp_path / "bad.toml"
    bad.write_text(src.replace("{start_hz}", placeholder, 1), encoding="utf-8")
    with pytest.raises(InputError, match="commands.start") as e:
        load_profile_file(bad)
    assert len(str(e.value)) < 300


@pytest.mark.parametrize("text", [
    'name = "x"\nkind = "analyzer"\n[connection]\ntimeout_s = ' + "9" * 5000 + "\n",
    'name = "x"\nkind = "' + "k" * 100_000 + '"\n',
    'name = "x"\n' + "k" * 100_000 + ' = 1\n',
])
def test_damaged_profile_gives_one_short_error(tmp_path, text):
    """A 5000-digit integer (Python refuses to convert it) or a 100 000-character key or
    value: one InputError naming the file, its message a readable length."""
    f = tmp_path / "bad.toml"
    f.write_text(text)
    with pytest.raises(InputError) as info:
        load_profile_file(f)
    msg = str(info.value)
    assert "bad.toml" in msg and len(msg) < 400, msg
