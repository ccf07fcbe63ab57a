"""The README tour is real output: regenerating it changes nothing but timings.

``docs/make_readme_tour.py --check`` runs every ``$ simwave`` block of the tour in a
scratch folder and compares with README.md, timings and worker counts masked; when it
fails, run ``python docs/make_readme_tour.py`` and commit the README.
"""

import importlib.util
import os
import re

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _script():
    spec = importlib.util.spec_from_file_location(
        "make_readme_tour", os.path.join(ROOT, "docs", "make_readme_tour.py"))
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_readme_tour_is_current(capsys):
    assert _script().main(["--check"]) == 0, capsys.readouterr().out


def test_readme_set_up_commands_follow_the_first_paragraph():
    with open(os.path.join(ROOT, "README.md"), encoding="utf-8") as fh:
        text = fh.read()
    blocks = re.findall(r"```bash\n(.*?)\n```", text, re.S)
    assert blocks[:2] == ["python -m pip install -e . && simwave demo",
                          "python -m pip install -e '.[test]' && python -m pytest"]
    assert text.index("```bash") < text.index("## Tour")


def test_masking_hides_only_what_varies():
    m = _script()
    a = "4 run now (local process pool, 2 workers) in 7.76 s\n(demo took 11.3 s)\ntime       0.4 s"
    b = "4 run now (in-process, 1 job) in 1.02 s\n(demo took 3 s)\ntime       0.104 s"
    assert m.normalize(a) == m.normalize(b)
    assert m.normalize("overshoot 5.566 %") != m.normalize("overshoot 3.981 %")
