"""Safe, bounded, located YAML loading."""

import tracemalloc

import pytest

from drivers.errors import LocatedError
from drivers.yamlsafe import YamlMap, YamlSeq, load_yaml


def test_locations_of_keys_and_items():
    data = load_yaml("a: 1\nb:\n  - x\n  - {c: 2}\n", "f.yaml")
    assert isinstance(data, YamlMap)
    assert data.where("b").line == 3
    assert data.where("b", of_key=True) .line == 2
    seq = data["b"]
    assert isinstance(seq, YamlSeq)
    assert seq.where(1).line == 4 and seq.where(1).column == 5
    assert seq[1].where("c").line == 4


def test_python_tag_is_refused_not_built():
    with pytest.raises(LocatedError) as exc:
        load_yaml("x: !!python/object/apply:os.system ['true']\n", "evil.yaml")
    assert "evil.yaml:1:4" in str(exc.value)
    assert "not allowed" in str(exc.value)


def test_billion_laughs_refused_fast():
    # The classic exponential alias expansion ("billion laughs"), 9 levels of 9 aliases.
    lines = ['a0: &a0 ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]']
    for i in range(1, 9):
        refs = ",".join([f"*a{i - 1}"] * 9)
        lines.append(f"a{i}: &a{i} [{refs}]")
    text = "\n".join(lines) + "\n"
    tracemalloc.start()
    try:
        with pytest.raises(LocatedError, match="alias"):
            load_yaml(text, "bomb.yaml")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    # refused before expanding: 9^9 = 387 million nodes expanded would take tens of gigabytes
    assert peak < 8 * 2**20, peak


def test_small_alias_use_is_fine():
    data = load_yaml("base: &b {x: 1}\nother: *b\n", "ok.yaml")
    assert data["other"] == {"x": 1}


def test_syntax_error_located():
    with pytest.raises(LocatedError) as exc:
        load_yaml("a: [1, 2\nb: 3\n", "bad.yaml")
    assert str(exc.value).startswith("bad.yaml:")
    assert "YAML syntax" in str(exc.value)


def test_duplicate_key():
    with pytest.raises(LocatedError, match=r"dup.yaml:2:1: duplicate key 'a'"):
        load_yaml("a: 1\na: 2\n", "dup.yaml")


def test_size_cap_and_binary():
    with pytest.raises(LocatedError, match="above the limit"):
        load_yaml("a: " + "x" * 3_000_000, "big.yaml")
    with pytest.raises(LocatedError, match="UTF-8"):
        load_yaml(b"\xff\xfe\x00", "bin.yaml")


def count_scanned_tokens(monkeypatch) -> list[int]:
    """Count PyYAML's scanner work (one entry per ``fetch_more_tokens`` call)."""
    import yaml.scanner

    calls: list[int] = []
    original = yaml.scanner.Scanner.fetch_more_tokens

    def counting(self):
        calls.append(1)
        return original(self)

    monkeypatch.setattr(yaml.scanner.Scanner, "fetch_more_tokens", counting)
    return calls


@pytest.mark.parametrize("opening", ["[", "{"])
def test_deep_flow_nesting_is_refused_before_pyyaml_scans_it(monkeypatch, opening):
    # PyYAML's scanner keeps each open bracket as a possible simple key and looks at all of them
    # at every token: thousands of brackets on a line cost seconds before the composer's depth
    # check.  Refused by a linear look first -- PyYAML never scans a token -- and located at the
    # 65th bracket ("a: " is 3 characters, so column 3 + 64 + 1).
    scanned = count_scanned_tokens(monkeypatch)
    tracemalloc.start()
    try:
        with pytest.raises(LocatedError) as exc:
            load_yaml("a: " + opening * 200_000 + "\n", "deep.yaml")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert str(exc.value) == "deep.yaml:1:68: nesting deeper than 64 levels"
    assert scanned == []
    assert peak < 1_000_000  # nothing built from the 200,000 brackets


def test_deep_nesting_over_many_lines_is_located_at_its_line(monkeypatch):
    scanned = count_scanned_tokens(monkeypatch)
    with pytest.raises(LocatedError) as exc:
        load_yaml("a:\n" + "[\n" * 50_000, "lines.yaml")
    assert str(exc.value) == "lines.yaml:66:1: nesting deeper than 64 levels"
    assert scanned == []


def test_brackets_in_quotes_and_comments_do_not_count_and_shallow_nesting_loads():
    text = (
        'a: "' + "[" * 100 + '\\" {"\n'
        "b: '" + "{" * 100 + "''['\n"
        "# " + "[" * 100 + "\n"
        "c: " + "[" * 63 + "]" * 63 + "\n"  # 63 lists in the mapping: 64 levels, the limit
    )
    data = load_yaml(text, "ok.yaml")
    assert data["a"] == "[" * 100 + '" {'
    assert data["b"] == "{" * 100 + "'["
    depth, node = 0, data["c"]
    while isinstance(node, list) and node:
        depth, node = depth + 1, node[0]
    assert depth == 62 and node == []  # 63 lists: the innermost is empty
