"""Fuzzing the JSON readers: plant model, fit result, design, frequency response, loop files.

Valid objects written by benchfit round-trip; damaged JSON (a node replaced by a
value of the wrong type, a key removed, numbers made huge or non-finite, the text
itself truncated or bytes flipped) gives either an object or benchfit's own error
naming the file, never another exception (KeyError, TypeError, AttributeError...).
"""

import json

import numpy as np
import pytest
from fuzz_mutate import expect_own_error, mutation
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scenario_plants import buck_plant

from benchfit.data import FrequencyResponse
from benchfit.fileio import to_json_text
from benchfit.fitting import fit
from benchfit.fitting.model import PlantModel
from benchfit.fitting.result import FitResult
from benchfit.loop.design import Design, design
from benchfit.loop.loopfile import read_loop
from benchfit.loop.loopgain import LoopPlant
from benchfit.loop.sensing import Sensing
from benchfit.loop.synthesis import Targets

# A reader must answer damaged input with a result or an InputError, never with numpy
# RuntimeWarnings printed on the user's terminal.
pytestmark = pytest.mark.filterwarnings("error::RuntimeWarning")

NORMAL = settings(max_examples=120, deadline=None,
                  suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
FUZZ = settings(deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                      HealthCheck.too_slow, HealthCheck.data_too_large])


@pytest.fixture(scope="module")
def valid_docs():
    """One valid JSON document of each kind benchfit writes (built once)."""
    m = buck_plant()
    f = np.logspace(1, 6, 120)
    resp = FrequencyResponse(freq_hz=f, response=m.response(f), quantity="plant")
    fr = fit(resp, order=2, delay="none")
    d = design(LoopPlant(m, Sensing.divider(30e3, 10e3), name="buck", band_hz=(10, 1e6)), "type3",
               Targets(20e3, 55, 10), draws=50, seed=1)
    return {"model": json.loads(to_json_text(m.to_dict())),
            "fit": json.loads(to_json_text(fr.to_dict())),
            "design": json.loads(to_json_text(d.to_dict())),
            "response": json.loads(to_json_text(resp.to_dict()))}


READERS = {
    "model": PlantModel.from_json,
    "fit": FitResult.from_json,
    "design": Design.from_json,
    "response": FrequencyResponse.from_json,
    "loop": read_loop,
}

_WRONG = st.one_of(st.none(), st.booleans(), st.integers(-10**30, 10**30), st.text(max_size=8),
                   st.sampled_from([1e308, -1e308, 0.0, -0.0, "inf", "-inf", "nan", [], {}, [[]],
                                    [1.0], [[1.0, 2.0, 3.0]], [None, None], {"re": 1}]),
                   st.lists(st.floats(allow_nan=False), max_size=4))


def _paths(doc, prefix=()):
    yield prefix
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(doc, list):
        for i, v in enumerate(doc[:6]):
            yield from _paths(v, prefix + (i,))


@st.composite
def damaged_doc(draw, doc):
    """A deep copy of ``doc`` with one to three nodes replaced or removed."""
    doc = json.loads(json.dumps(doc))
    for _ in range(draw(st.integers(1, 3))):
        paths = [p for p in _paths(doc) if p]
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent = doc
        try:
            for k in path[:-1]:
                parent = parent[k]
            if draw(st.booleans()) and isinstance(parent, dict):
                del parent[path[-1]]
            else:
                parent[path[-1]] = json.loads(json.dumps(draw(_WRONG)))  # a fresh copy
        except (KeyError, IndexError, TypeError):
            continue  # an earlier change removed this path
    return doc


def _check(tmp_path_factory, reader, text_or_bytes):
    p = tmp_path_factory.mktemp("j") / "doc.json"
    p.write_bytes(text_or_bytes if isinstance(text_or_bytes, bytes) else text_or_bytes.encode())
    expect_own_error(lambda: READERS[reader](p), names=p.name)


def test_valid_documents_round_trip(valid_docs, tmp_path):
    for kind, cls in (("model", PlantModel), ("fit", FitResult), ("design", Design)):
        p = tmp_path / f"{kind}.json"
        p.write_text(json.dumps(valid_docs[kind]), encoding="utf-8")
        obj = cls.from_json(p)
        assert json.loads(to_json_text(obj.to_dict())) == valid_docs[kind]
    f = np.logspace(1, 6, 120)
    np.testing.assert_allclose(PlantModel.from_json(tmp_path / "model.json").response(f),
                               buck_plant().response(f), rtol=1e-12)


@NORMAL
@given(data=st.data(), kind=st.sampled_from(["model", "fit", "design", "response"]))
def test_damaged_structure(valid_docs, tmp_path_factory, data, kind):
    doc = data.draw(damaged_doc(valid_docs[kind]))
    reader = data.draw(st.sampled_from([kind, "loop"] if kind != "response" else [kind]))
    _check(tmp_path_factory, reader, json.dumps(doc))


@NORMAL
@given(data=st.data(), kind=st.sampled_from(["model", "fit", "design"]))
def test_damaged_text(valid_docs, tmp_path_factory, data, kind):
    text = json.dumps(valid_docs[kind], indent=1).encode()
    _check(tmp_path_factory, data.draw(st.sampled_from([kind, "loop"])), data.draw(mutation(text)))


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), kind=st.sampled_from(["model", "fit", "design", "response"]))
def test_damaged_structure_fuzz(valid_docs, tmp_path_factory, data, kind):
    test_damaged_structure.hypothesis.inner_test(valid_docs, tmp_path_factory, data, kind)


@pytest.mark.fuzz
@FUZZ
@given(data=st.data(), kind=st.sampled_from(["model", "fit", "design"]))
def test_damaged_text_fuzz(valid_docs, tmp_path_factory, data, kind):
    test_damaged_text.hypothesis.inner_test(valid_docs, tmp_path_factory, data, kind)
