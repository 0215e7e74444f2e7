"""The command line's shell: one-line errors with exit status 2 (common practice for CLIs)."""
from tests.conftest import run_cli


def test_help_lists_commands():
    out = run_cli("--help")
    assert out.returncode == 0
    assert "streamtab" in out.stdout


def test_unknown_command_is_one_line_exit_2():
    out = run_cli("no-such-command")
    assert out.returncode == 2
    assert len(out.stderr.strip().splitlines()) == 1
    assert "Traceback" not in out.stderr
