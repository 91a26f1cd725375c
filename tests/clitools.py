"""Helpers shared by the command-line tests: run ``velspec`` in-process and judge its errors."""

from velspec.cli import main


def run(argv, capsys):
    """Run ``velspec ARGV`` in this process; (exit status, stdout, stderr)."""
    status = main([str(a) for a in argv])
    out = capsys.readouterr()
    return status, out.out, out.err


def assert_user_error(status, err, *words):
    """Exit status 2 and exactly one ``velspec: error:`` line naming every word, no traceback."""
    lines = [ln for ln in err.strip().splitlines() if ln]
    assert status == 2
    assert len(lines) == 1 and lines[0].startswith("velspec: error:"), err
    assert "Traceback" not in err
    for w in words:
        assert w in lines[0], (w, lines[0])


def no_output(directory):
    """Result or partial files left in ``directory``."""
    return [p.name for p in directory.iterdir() if p.suffix in (".h5", ".partial") or p.name.endswith(".partial")]
