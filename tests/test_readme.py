"""The README's Python example runs as written (common practice, no source: docs that run)."""

from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_readme_python_example_runs(tmp_path, monkeypatch, capsys):
    text = (ROOT / "README.md").read_text()
    start = text.index("```python\n") + len("```python\n")
    code = text[start:text.index("```", start)]
    monkeypatch.chdir(ROOT)
    monkeypatch.setenv("RETINA_CACHE", str(tmp_path / "cache"))
    exec(compile(code, "README.md", "exec"), {})
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("Anisotropy(")
    lo, hi = map(float, out[1].split())
    assert lo < 0 < hi  # a relative modulation has both signs about the eye mean
