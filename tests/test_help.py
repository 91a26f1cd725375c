"""Every command's help is complete and consistent: an examples block whose examples parse,
every option described, and the first-pass caution."""

import re
import shlex

import pytest

from velspec.cli import build_parser

PARSER = build_parser()


def _help(argv, capsys):
    with pytest.raises(SystemExit) as stop:
        PARSER.parse_args(argv)
    assert stop.value.code == 0
    return capsys.readouterr().out


def _examples(text):
    block = text.split("examples:\n", 1)[1].split("\n\n", 1)[0]
    return [line.split("#", 1)[0].strip() for line in block.splitlines() if line.strip()]


def _commands(capsys):
    text = _help(["--help"], capsys)
    listed = text.split("COMMAND\n", 2)[-1].split("\n\n", 1)[0]
    return [line.split()[0] for line in listed.splitlines() if line.strip()]


COMMANDS = ["compare", "config", "demo", "export", "inspect", "picks", "report", "revise", "run"]


def test_top_level_help_lists_every_command(capsys):
    assert sorted(_commands(capsys)) == COMMANDS
    text = _help(["--help"], capsys)
    assert "qualified people must review" in text
    assert {e.split()[1] for e in _examples(text) if e.split()[1] != "COMMAND"} == set(COMMANDS)


@pytest.mark.parametrize("command", COMMANDS)
def test_command_help_has_examples_that_parse(command, capsys):
    text = _help([command, "--help"], capsys)
    assert "qualified people must review" in text
    # every option and argument listed has a description (on its line or the next)
    listing = text.split("examples:", 1)[0].split("\n\n", 2)[-1]
    rows = listing.splitlines()
    for k, row in enumerate(rows):
        m = re.match(r"^  (\S.*?)(\s{2,}(\S.*))?$", row)
        if m and not row.endswith(":") and not row.startswith("   "):
            described = m.group(3) or (k + 1 < len(rows) and rows[k + 1].startswith(" " * 10))
            assert described, row
    examples = _examples(text)
    assert examples, text
    assert shlex.split(examples[0])[:2] == ["velspec", command]
    for line in examples:   # the command's own, and the steps around it in a workflow
        argv = shlex.split(line.split(">", 1)[0])
        assert argv[0] == "velspec" and argv[1] in COMMANDS, line
        PARSER.parse_args(argv[1:])   # a usage error here raises
