import os

import pytest

os.environ.setdefault("PYVISTA_OFF_SCREEN", "true")


@pytest.fixture
def cli(capsys):
    """Run the command line in-process: returns (status, stdout, stderr)."""
    from crystalview.cli import main

    def run(*argv):
        rc = main([str(a) for a in argv])
        out = capsys.readouterr()
        return rc, out.out, out.err

    return run
