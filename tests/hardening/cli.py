"""Running the command line in this process, as a person would from a shell."""

from __future__ import annotations

from dataclasses import dataclass

from app.cli import main


@dataclass
class Outcome:
    code: int
    out: str
    err: str

    def one_line_refusal(self) -> bool:
        """Exit 2 with exactly one line on stderr that names the problem (no traceback)."""
        lines = [line for line in self.err.splitlines() if line.strip()]
        return self.code == 2 and len(lines) == 1 and lines[0].startswith("gridscore: ") and "Traceback" not in self.err


def run(capsys, *argv: str) -> Outcome:
    capsys.readouterr()
    try:
        code = main(list(argv))
    except SystemExit as done:  # argparse usage errors
        code = int(done.code or 0)
    captured = capsys.readouterr()
    return Outcome(code, captured.out, captured.err)
