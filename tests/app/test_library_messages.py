"""Library code says what is wrong with the data, never which command-line option to type (issue 14 item 5).

The window shows the same messages, so "--horizon: ..." would point a window user at an option they
cannot see. Only caseview/cli may name options. The timeline import still names its options
(``--map``, ``--drop``, ``--date-format``, ``--header-row``, ``--replace``): the import dialog offers
the same choices under those names; they are listed here so a new one cannot slip in.
"""

import ast
import pathlib
import re

ROOT = pathlib.Path(__file__).resolve().parents[2]
OPTION = re.compile(r"(?<![\w-])--[a-z][a-z-]*")
IMPORT_OPTIONS = {"--map", "--drop", "--date-format", "--header-row", "--replace"}


def _raised_texts(tree):
    """The literal text of every ``raise SomeError(...)`` message in a module."""
    for node in ast.walk(tree):
        if isinstance(node, ast.Raise) and isinstance(node.exc, ast.Call):
            for arg in node.exc.args:
                for part in ast.walk(arg):
                    if isinstance(part, ast.Constant) and isinstance(part.value, str):
                        yield part.lineno, part.value


def test_library_messages_name_no_command_line_option():
    found = []
    for path in (ROOT / "caseview").rglob("*.py"):
        relative = path.relative_to(ROOT)
        if relative.parts[1] == "cli":
            continue
        for line, text in _raised_texts(ast.parse(path.read_text(encoding="utf-8"))):
            options = set(OPTION.findall(text))
            if relative.parts[1] == "timeline_io":
                options -= IMPORT_OPTIONS
            if options:
                found.append(f"{relative}:{line}: {sorted(options)}")
    assert found == []
