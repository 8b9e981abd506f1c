"""Fuzzed scene files: mutated samples and random JSON must load or fail with a SceneError.

Every example ends in one of two ways: a Scene, or a SceneError whose problems each name a JSON
path starting with "$".  Any other exception, a hang (hypothesis deadline off, but each load is
timed) or a change to the file on disk is a failure.  Hypothesis runs derandomized, so the same
cases are tried on every run; raise RAYTRACE_FUZZ_EXAMPLES to search longer.
"""
from __future__ import annotations

import copy
import json
import os
import sys
import time
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from raytrace.errors import SceneError
from raytrace.scene import Scene
from raytrace.scene_io import load_scene, scene_from_text

SAMPLES = sorted((Path(__file__).parent.parent / "samples").glob("*.json"))
SAMPLE_DATA = [json.loads(p.read_text(encoding="utf-8")) for p in SAMPLES]
EXAMPLES = int(os.environ.get("RAYTRACE_FUZZ_EXAMPLES", "500"))
MAX_LOAD_S = 5.0   # a single load slower than this counts as a hang

FUZZ = settings(max_examples=EXAMPLES, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                       HealthCheck.function_scoped_fixture])

# values a mutation may drop in place of a field: wrong types, out-of-range and non-finite numbers
ODD_VALUES = st.one_of(
    st.none(), st.booleans(), st.integers(-10**6, 10**6),
    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12),
    st.just([]), st.just({}), st.just([1.0]), st.just([1.0, "x"]), st.just([[0, 0], [1, 1]]),
    st.just(0), st.just(-1.0), st.just(1e308), st.just(-1e-300),
    st.just("NaN-token"), st.just("Infinity-token"), st.just("-Infinity-token"),
    st.just("1e400-token"), st.just(10**400), st.just(-(10**5000)), st.just(2**63),
)

JSON_LEAF = st.one_of(st.none(), st.booleans(), st.integers(-1000, 1000),
                      st.floats(allow_nan=False, allow_infinity=False), st.text(max_size=8))
RANDOM_JSON = st.recursive(JSON_LEAF, lambda kids: st.lists(kids, max_size=4)
                           | st.dictionaries(st.text(max_size=8), kids, max_size=4), max_leaves=25)


def _paths(node, prefix=()):
    """Every (container path) in a JSON tree, for choosing where to mutate."""
    yield prefix
    if isinstance(node, dict):
        for k, v in node.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _paths(v, prefix + (i,))


def _get(node, path):
    for k in path:
        node = node[k]
    return node


@st.composite
def mutated_sample(draw):
    """A sample with 1-4 mutations: delete a key or item, replace a value, add an unknown key."""
    data = copy.deepcopy(draw(st.sampled_from(SAMPLE_DATA)))
    for _ in range(draw(st.integers(1, 4))):
        paths = [p for p in _paths(data) if p]
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent = _get(data, path[:-1])
        key = path[-1]
        action = draw(st.sampled_from(("delete", "replace", "replace", "unknown", "duplicate")))
        if action == "delete":
            del parent[key]
        elif action == "replace":
            parent[key] = copy.deepcopy(draw(ODD_VALUES))
        elif action == "unknown" and isinstance(parent, dict):
            parent[draw(st.text(min_size=1, max_size=6))] = copy.deepcopy(draw(ODD_VALUES))
        elif action == "duplicate" and isinstance(parent, list):
            parent.append(copy.deepcopy(parent[key]))
    return data


def _to_text(data) -> str:
    """JSON text; the NaN/Infinity markers become the bare tokens Python's parser accepts."""
    sys.set_int_max_str_digits(0)      # let json.dumps write the 5000-digit integer
    try:
        text = json.dumps(data, indent=1)
    finally:
        sys.set_int_max_str_digits(4300)
    for token in ("NaN", "Infinity", "-Infinity", "1e400"):
        text = text.replace(f'"{token}-token"', token)
    return text


def _check_outcome(text: str, tmp_path: Path) -> None:
    f = tmp_path / "fuzzed.json"
    f.write_text(text, encoding="utf-8")
    before = f.read_bytes()
    mtime = os.stat(f).st_mtime_ns
    t0 = time.perf_counter()
    try:
        scene = load_scene(f)
    except SceneError as exc:
        assert exc.problems, "a SceneError must carry at least one problem"
        for p in exc.problems:
            assert p.path.startswith("$"), p
            assert p.file == str(f), p
            assert p.expected, p
            assert "Traceback" not in str(p)
    else:
        assert isinstance(scene, Scene)
    assert time.perf_counter() - t0 < MAX_LOAD_S, "load took too long (a hang)"
    assert f.read_bytes() == before and os.stat(f).st_mtime_ns == mtime, "load changed the file"


@FUZZ
@given(data=mutated_sample())
def test_mutated_samples_load_or_fail_cleanly(data, tmp_path):
    _check_outcome(_to_text(data), tmp_path)


@FUZZ
@given(data=st.sampled_from(SAMPLE_DATA), cut=st.floats(0.0, 1.0))
def test_truncated_samples_fail_cleanly(data, cut, tmp_path):
    text = json.dumps(data, indent=2)
    _check_outcome(text[: int(cut * (len(text) - 1))], tmp_path)


@FUZZ
@given(data=RANDOM_JSON)
def test_random_json_fails_cleanly(data, tmp_path):
    _check_outcome(json.dumps(data), tmp_path)


@FUZZ
@given(data=st.sampled_from(SAMPLE_DATA), raw=st.binary(max_size=40), at=st.floats(0.0, 1.0))
def test_random_bytes_spliced_into_samples_fail_cleanly(data, raw, at, tmp_path):
    text = json.dumps(data).encode()
    k = int(at * len(text))
    f = tmp_path / "spliced.json"
    f.write_bytes(text[:k] + raw + text[k:])
    before, mtime = f.read_bytes(), os.stat(f).st_mtime_ns
    try:
        load_scene(f)
    except SceneError as exc:
        assert all(p.path.startswith("$") for p in exc.problems)
    assert f.read_bytes() == before and os.stat(f).st_mtime_ns == mtime


def test_deeply_nested_json_is_a_scene_error():
    """A pathological file (deep nesting) must not blow the stack with a raw RecursionError."""
    with pytest.raises(SceneError) as info:
        scene_from_text("[" * 100_000 + "]" * 100_000)
    assert info.value.problems[0].path == "$"
