"""The README's Python examples run as written and give the answers shown beside them: an
expression followed by `  # VALUE` on its line, or by a line `# VALUE`, is checked by
comparing its repr with VALUE."""

import ast
import os
import re
import subprocess
import sys

import numpy as np

from conftest import DEMO, REPO, waymark_bin


def python_blocks():
    text = (REPO / "README.md").read_text(encoding="utf-8")
    section = text.split("\n## Python\n", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```python\n(.*?)```", section, flags=re.S)


def is_expression(code):
    try:
        ast.parse(code, mode="eval")
        return True
    except SyntaxError:
        return False


def with_checks(block):
    """The block with each shown value turned into a check of the expression before it."""
    lines = block.splitlines()
    out = []
    for i, line in enumerate(lines):
        code, _, shown = line.partition("  # ")
        if not shown and i + 1 < len(lines) and lines[i + 1].startswith("# "):
            shown = lines[i + 1][2:]
        if shown and code and not code[0].isspace() and is_expression(code):
            out.append(f"_check(({code.strip()}), {shown.strip()!r})")
        else:
            out.append(line)
    return "\n".join(out)


def test_the_readme_python_examples_give_the_answers_shown(tmp_path):
    blocks = python_blocks()
    assert len(blocks) >= 2
    os.symlink(DEMO, tmp_path / "demo-data")
    checked = []

    def check(value, shown):
        assert repr(value) == shown
        checked.append(shown)

    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        scope = {"_check": check, "np": np}
        for block in blocks:
            exec(with_checks(block), scope)
    finally:
        os.chdir(cwd)
    assert len(checked) >= 6, checked


def test_the_readme_cluster_example_runs_in_local_mode(tmp_path):
    """The worked example of "More than one machine", run with its local defaults: the
    command line builds, `spark-submit` runs the jobs, and it prints what is shown."""
    text = (REPO / "README.md").read_text(encoding="utf-8")
    section = text.split("\n## More than one machine\n", 1)[1].split("\n## ", 1)[0]
    script, shown = re.search(r"```sh\n(.*?)```\n\nprints\n\n```text\n(.*?)```", section, flags=re.S).groups()
    os.symlink(DEMO, tmp_path / "demo-data")
    env = dict(os.environ)
    env["PATH"] = os.pathsep.join([os.path.dirname(sys.executable), str(waymark_bin().parent), env["PATH"]])
    env["PYSPARK_PYTHON"] = sys.executable
    env["SHARED"] = str(tmp_path / "shared")
    env.pop("MASTER", None)
    out = subprocess.run(
        ["bash", "-euo", "pipefail", "-c", script], cwd=tmp_path, env=env, capture_output=True, text=True
    )
    assert out.returncode == 0, out.stderr[-3000:]
    assert out.stdout == shown
