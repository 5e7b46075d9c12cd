"""Shipped instrument profiles speak only standard forms.

Every command of every shipped profile must be one of the forms listed here, taken
from IEEE Std 488.2-1992 (common commands, section 10) and SCPI-1999 (SCPI Consortium,
Volume 2 "Command Reference": SYSTem, FORMat, SENSe, SOURce, INITiate, CALCulate and
TRACe subsystems).  The list was written from memory of those documents, long forms with
the standard capitalisation.  A word from one maker's command set in a shipped profile
fails this test; such words belong in a user's own profile.
"""

import re

import pytest

from benchfit.bench.profile import SHIPPED_DIR, load_profile_file

#: IEEE 488.2 common commands and queries.
IEEE4882 = {"*IDN?", "*CLS", "*RST", "*OPC?", "*OPC", "*TRG", "*WAI", "*ESR?", "*STB?"}

#: SCPI-1999 headers (optional nodes written out) with the parameters allowed after them;
#: "{}" is a placeholder benchfit fills with a number, "{channel}" a trace name.
SCPI1999 = {
    "SYSTem:ERRor?": [""],
    "FORMat:DATA": ["ASCii", "REAL,32", "REAL,64", "INTeger,8", "INTeger,16", "INTeger,32"],
    "FORMat:BORDer": ["NORMal", "SWAPped"],
    "SENSe:SWEep:SPACing": ["LOGarithmic", "LINear"],
    "SENSe:FREQuency:STARt": ["{}"], "SENSe:FREQuency:STARt?": [""],
    "SENSe:FREQuency:STOP": ["{}"], "SENSe:FREQuency:STOP?": [""],
    "SENSe:SWEep:POINts": ["{}"], "SENSe:SWEep:POINts?": [""],
    "SENSe:BANDwidth:RESolution": ["{}"],
    "SOURce:VOLTage:LEVel:IMMediate:AMPLitude": ["{}"],
    "SOURce:FREQuency:MODE": ["SWEep", "CW", "FIXed"],
    "SOURce:FREQuency:CW": ["{}"], "SOURce:FREQuency:CW?": [""],
    "INITiate:IMMediate": [""],
    "CALCulate:DATA?": [""],
    "SENSe:SWEep:TINTerval?": [""],
    "SENSe:SWEep:OFFSet:TIME?": [""],
    "TRACe:DATA?": ["{channel}"],
}

PROFILES = sorted(SHIPPED_DIR.glob("*.toml"))


def _form(text: str) -> tuple[str, str]:
    header, _, params = text.strip().partition(" ")
    params = re.sub(r"\{channel\}", "{channel}", params.strip())
    params = re.sub(r"\{(?!channel\})[a-z_]+\}", "{}", params)
    return header, params


@pytest.mark.parametrize("path", PROFILES, ids=lambda p: p.name)
def test_every_shipped_command_is_a_standard_form(path):
    prof = load_profile_file(path)
    assert prof.commands, path
    for key, text in prof.commands.items():
        header, params = _form(text)
        if header.startswith("*"):
            assert text.strip() in IEEE4882, f"{path.name} commands.{key} = {text!r}: not IEEE 488.2"
            continue
        assert header in SCPI1999, f"{path.name} commands.{key} = {text!r}: header not in SCPI-1999 list"
        assert params in SCPI1999[header], (f"{path.name} commands.{key} = {text!r}: parameter "
                                            f"{params!r} not a standard one for {header}")


def test_the_check_catches_a_maker_word():
    """The check is not vacuous: a data selector or a waveform-preamble query fails it."""
    for text in ("CALCulate:DATA? SDATa", "TRACe:XINCrement? CH1", "SENSe:FREQuency:DATA?"):
        header, params = _form(text)
        assert header not in SCPI1999 or params not in SCPI1999[header]
