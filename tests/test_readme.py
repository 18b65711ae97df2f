"""The README's Python example runs as written (it is the API tour users copy)."""
import re
from pathlib import Path

ROOT = Path(__file__).parents[1]


def test_readme_python_example_runs(tmp_path, monkeypatch):
    import pyvista

    pyvista.OFF_SCREEN = True
    text = (ROOT / "README.md").read_text()
    blocks = re.findall(r"```python\n(.*?)```", text, re.S)
    assert blocks, "README has no Python example"
    code = blocks[-1].replace('"scenes/', f'"{ROOT}/scenes/')
    monkeypatch.chdir(tmp_path)
    exec(compile(code, "README.md", "exec"), {})
    assert (tmp_path / "fig.png").is_file() and (tmp_path / "cu.stl").is_file()
    assert (tmp_path / "exports" / "carburising-fit" / "manifest.json").is_file()


def test_readme_starts_with_the_job_and_the_two_commands():
    text = (ROOT / "README.md").read_text()
    head = text.split("## ")[0]
    assert "make demo" in head and "make test" in head
    assert "make test" in (ROOT / ".ci" / "run").read_text()
