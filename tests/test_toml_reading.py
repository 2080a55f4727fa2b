"""Reading TOML files: the line of every key (issue 11), and files that are refused before parsing (issue 10).

Line numbers here are those of the constructed texts themselves (counted in
the test); the grammar is TOML 1.0 (toml.io/en/v1.0.0), and the standard
library's ``tomllib`` checks that each generated text is valid TOML.
"""

from __future__ import annotations

import os
import socket
import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from firewatch.cli import main
from firewatch.settings._tomlcheck import (
    MAX_BYTES,
    MAX_DEPTH,
    ProfileError,
    TomlReader,
    UnusableFile,
    read_text_file,
)
from firewatch.settings._tomllines import key_lines, scan
from firewatch.settings.profile import load_site, profiles_dir

GOOD_SITE = (profiles_dir() / "demo-site.toml").read_text()


def _line_of(text: str, needle: str, nth: int = 1) -> int:
    hits = [i for i, line in enumerate(text.splitlines(), start=1) if line.strip().startswith(needle)]
    return hits[nth - 1]


# -- line numbers (issue 11) ------------------------------------------------------------------
@pytest.mark.parametrize("quote", ['"""', "'''"])
def test_multiline_string_before_the_error_reports_the_true_line(tmp_path: Path, capsys, quote: str) -> None:
    # issue 11: a bad type on line 34 was reported on line 22, where a multi-line string held "type = ..."
    label = f'label = {quote}reference, beside the ware\n[[thermocouple]]\ntype = "K"\nname = "x" # not a key\n{quote}\n'
    text = GOOD_SITE.replace('label = "reference, beside the ware"\n', label, 1).replace('type = "S"', 'type = "Q"', 1)
    path = tmp_path / "p.toml"
    path.write_text(text)
    assert main(["check", str(path)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    true_line = _line_of(text, 'type = "Q"')
    assert true_line > _line_of(text, 'type = "K"', 2)  # the decoy inside the string comes first
    assert err == [f"{path}:{true_line}: thermocouple[2].type: unknown thermocouple type 'Q'; expected one of B, E, J, K, N, R, S, T"]


def test_key_lines_arrays_of_tables_dotted_keys_and_strings() -> None:
    text = "\n".join([
        "top = 1",                                  # 1
        's = "a \\" ] [x] = 2"',                    # 2
        "[site]",                                   # 3
        'name = """one',                            # 4
        "kiln = 3",                                 # 5: inside the string
        '"""',                                      # 6
        "a.b.'c.d' = 1",                            # 7
        "arr = [",                                  # 8
        '  "]", # ] a comment',                     # 9
        "  {x = 1, y = {z = 2}},",                  # 10
        "]",                                        # 11
        "[[t]]",                                    # 12
        "v = 1",                                    # 13
        "[t.sub]",                                  # 14
        "w = 1",                                    # 15
        "[[t]]",                                    # 16
        "v = '''",                                  # 17
        "v = 2",                                    # 18: inside the string
        "'''",                                      # 19
        "[[t.items]]",                              # 20
        "u = 1",                                    # 21
        "[[t.items]]",                              # 22
        "u = 2",                                    # 23
        '"quoted.key" = { p = 1, q.r = "}" }',      # 24
    ]) + "\n"
    tomllib.loads(text)  # valid TOML
    lines = key_lines(text)
    expected = {
        ("top",): 1, ("s",): 2, ("site",): 3, ("site", "name"): 4, ("site", "a", "b", "c.d"): 7, ("site", "arr"): 8,
        ("site", "arr", 1, "y", "z"): 10, ("t", 0): 12, ("t", 0, "v"): 13, ("t", 0, "sub"): 14, ("t", 0, "sub", "w"): 15,
        ("t", 1): 16, ("t", 1, "v"): 17, ("t", 1, "items", 0, "u"): 21, ("t", 1, "items", 1, "u"): 23,
        ("t", 1, "items", 1, "quoted.key", "q", "r"): 24,
    }
    assert {k: lines.get(k) for k in expected} == expected
    assert ("site", "kiln") not in lines and ("x",) not in lines


# a generator of valid TOML documents whose key lines are known by construction
_BARE = st.from_regex(r"[a-z][a-z0-9_]{0,6}", fullmatch=True)
_DECOY = st.sampled_from(['x = 1', '[t]', '[[t]]', 'a.b = "c"', '# c', ']', '[', '{', "'", '""'])


@st.composite
def _value(draw) -> list[str]:
    """A value as lines of text (the first continues the key's line)."""
    kind = draw(st.sampled_from(["int", "basic", "literal", "ml-basic", "ml-literal", "array", "inline"]))
    if kind == "int":
        return [str(draw(st.integers(-1000, 1000)))]
    if kind == "basic":
        return ['"' + draw(st.sampled_from(["a", "]", "[x]", '\\"', "#", "a = b"])) + '"']
    if kind == "literal":
        return ["'" + draw(st.sampled_from(["a", "]", '"', "#", "x = 1"])) + "'"]
    if kind == "ml-basic":
        return ['"""'] + draw(st.lists(_DECOY, max_size=3)) + ['\\"""', '"""']
    if kind == "ml-literal":
        return ["'''"] + draw(st.lists(_DECOY.filter(lambda d: "'" not in d), max_size=3)) + ["'''"]
    if kind == "array":
        items = draw(st.lists(st.sampled_from(['"]"', "1", "[1, [2]]", "{a = 1}", "# c"]), max_size=4))
        body = [f"  {x}," if not x.startswith("#") else f"  {x}" for x in items]
        return ["["] + body + ["]"]
    return ["{ k = 1, m.n = '}' }"]


@st.composite
def _document(draw) -> tuple[str, dict[tuple, int]]:
    lines: list[str] = []
    expected: dict[tuple, int] = {}
    counters: dict[str, int] = {}
    for t in range(draw(st.integers(0, 4))):
        name = f"t{t % 2}"
        if draw(st.booleans()) and name not in counters:
            lines.append(f"[{name}]")
            prefix: tuple = (name,)
            counters[name] = -1
        else:
            if counters.get(name, 0) == -1:
                name = f"u{t}"
            counters[name] = counters.get(name, -1) + 1
            lines.append(f"[[{name}]]")
            prefix = (name, counters[name])
        expected[prefix] = len(lines)
        for key in draw(st.lists(_BARE, min_size=1, max_size=4, unique=True)):
            value = draw(_value())
            lines.append(f"{key} = {value[0]}")
            expected[prefix + (key,)] = len(lines)
            lines.extend(value[1:])
            if draw(st.booleans()):
                lines.append("# a comment = [")
    return "\n".join(lines) + "\n", expected


@settings(max_examples=150, deadline=None)
@given(_document())
def test_key_lines_on_generated_documents(doc: tuple[str, dict[tuple, int]]) -> None:
    text, expected = doc
    tomllib.loads(text)  # the generator writes valid TOML
    lines = key_lines(text)
    assert {k: lines.get(k) for k in expected} == expected


@settings(max_examples=200, deadline=None)
@given(st.text(alphabet='[]{}"\'=.,#\n abc1\\', max_size=200))
def test_scan_never_fails_on_garbage(text: str) -> None:
    found = scan(text, MAX_DEPTH)
    assert found.depth >= 0


# -- nesting (issue 10) ----------------------------------------------------------------------
@pytest.mark.parametrize(
    "text",
    [
        "a = " + "[" * 5000,
        "a = " + "[" * 5000 + "]" * 5000,
        "[" + ".".join(["x"] * 5000) + "]\n",
        ".".join(["x"] * 5000) + " = 1\n",
        "a = " + "{b = " * 5000 + "1" + "}" * 5000,
        '[site]\nname = "x"\n\n' + "deep = " + "[" * 2000 + "]" * 2000 + "\n",
    ],
    ids=["open-arrays", "arrays", "tables", "dotted-key", "inline-tables", "deep-value-on-line-4"],
)
def test_deep_nesting_is_refused_with_its_line(text: str) -> None:
    # issue 10: a profile nested thousands of levels deep gave a RecursionError traceback
    with pytest.raises(ProfileError) as exc:
        TomlReader("deep.toml", text)
    line = 4 if text.startswith("[site]") else 1
    assert exc.value.problems == [f"deep.toml:{line}: nested deeper than {MAX_DEPTH} levels of tables and arrays; a profile needs only a few"]


def test_nesting_limit_boundary() -> None:
    # a = [[...]] with n brackets nests n + 1 deep (the key, then each array)
    ok = "a = " + "[" * (MAX_DEPTH - 1) + "]" * (MAX_DEPTH - 1)
    assert TomlReader("ok.toml", ok).data["a"] is not None
    with pytest.raises(ProfileError, match="nested deeper"):
        TomlReader("deep.toml", "a = " + "[" * MAX_DEPTH + "]" * MAX_DEPTH)


# -- files that are not profiles (issue 10) ---------------------------------------------------
def test_device_fifo_directory_and_huge_files_are_refused_unread(tmp_path: Path) -> None:
    fifo = tmp_path / "fifo.toml"
    os.mkfifo(fifo)  # nobody writes: a blocking open would wait for ever
    huge = tmp_path / "huge.toml"
    with huge.open("wb") as f:
        f.truncate(50 * 1024 * 1024)  # 50 MiB, sparse
    link = tmp_path / "zero.toml"
    link.symlink_to("/dev/zero")
    assert Path("/dev/zero").exists()
    sock_path = tmp_path / "socket.toml"
    sock = socket.socket(socket.AF_UNIX)
    sock.bind(str(sock_path))
    cases = {
        Path("/dev/zero"): "/dev/zero: is a character device, not a regular file",
        link: f"{link}: is a character device, not a regular file",
        fifo: f"{fifo}: is a named pipe (FIFO), not a regular file",
        tmp_path: f"{tmp_path}: is a directory, not a regular file",
        huge: f"{huge}: 50 MiB, larger than the 1 MiB a profile may be",
        tmp_path / "none.toml": f"{tmp_path / 'none.toml'}: no such file",
        sock_path: f"{sock_path}: is a socket, not a regular file",
    }
    try:
        for path, message in cases.items():
            with pytest.raises(UnusableFile) as exc:
                read_text_file(path)
            assert exc.value.problems == [message]
    finally:
        sock.close()


def test_size_limit_counts_the_bytes_read(tmp_path: Path) -> None:
    at = tmp_path / "at.toml"
    at.write_bytes(b"#" * (MAX_BYTES - 1) + b"\n")
    assert len(read_text_file(at)) == MAX_BYTES
    over = tmp_path / "over.toml"
    over.write_bytes(b"#" * MAX_BYTES + b"\n")
    with pytest.raises(UnusableFile, match="larger than the 1 MiB"):
        read_text_file(over)


def test_invalid_utf8_names_its_line(tmp_path: Path) -> None:
    path = tmp_path / "latin1.toml"
    path.write_bytes('[site]\nname = "Töpferei"\n'.encode("latin-1"))
    with pytest.raises(ProfileError) as exc:
        load_site(path)
    assert exc.value.problems == [f"{path}:2: not UTF-8 text (byte 0xf6); save the file as UTF-8"]
    assert not isinstance(exc.value, UnusableFile)  # content, not trouble: check exits 1
