"""Property: no input makes loopwarden fail internally (issue 12).

Malformed and edge-case design files and rule sets (``design_mutations.py``: the sample
designs and shipped rule sets with numbers replaced by extreme values, keys deleted or
renamed, values of the wrong type, deep nesting, random TOML) are reviewed through the
command line.  For every case:

* the exit status is 0, 1 or 2 (never 3, an internal error);
* an exit-2 message names the file at fault (the design, the rule set, or the measurement
  file beside the design) and a place in it (a table and key, or a line);
* nothing is written on exit 2.

Hypothesis drives a seeded ``random.Random`` (derandomized, so CI runs the same cases
every time); ``bench/fuzz_designs.py`` runs the same generator over many more cases.
"""

from __future__ import annotations

import contextlib
import io
import re
import shutil
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from design_mutations import design_case, ruleset_case
from loopwarden.cli import main

ROOT = Path(__file__).resolve().parents[1]
_MESSAGE = re.compile(r"^loopwarden: error: (?P<file>[^:]+): (?P<where>[^:]+): \S")


def _review(folder: Path, rng, with_rules: bool) -> tuple[int, str, Path, Path | None]:
    _stem, text = design_case(rng)
    design = folder / "design.toml"
    design.write_text(text, encoding="utf-8", errors="surrogatepass")
    shutil.copy(ROOT / "sample_designs" / "spindle_sweep.csv", folder / "spindle_sweep.csv")
    out = folder / "out"
    out.mkdir()
    args = ["review", str(design), "--json", str(out / "r.json"), "--junit",
            str(out / "r.xml"), "--markdown", str(out / "r.md"), "--out",
            str(out / "r.pdf"), "--quiet", "--date", "2026-06-01"]
    rules = None
    if with_rules:
        rules = folder / "rules.toml"
        rules.write_text(ruleset_case(rng), encoding="utf-8", errors="surrogatepass")
        args += ["--rules", str(rules)]
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        code = main(args)
    return code, err.getvalue(), design, rules


@settings(max_examples=150, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(rng=st.randoms(use_true_random=False), with_rules=st.booleans())
def test_malformed_inputs_never_fail_internally(tmp_path_factory, rng, with_rules):
    folder = tmp_path_factory.mktemp("case")
    code, err, design, rules = _review(folder, rng, with_rules)
    assert code in (0, 1, 2), f"exit {code}\n{design.read_text(encoding='utf-8')}\n{err}"
    if code != 2:
        return
    m = _MESSAGE.match(err)
    assert m is not None, f"no file and place in the message: {err}"
    named = Path(m.group("file"))
    allowed = {design, rules} if rules is not None else {design}
    assert named in allowed or named.parent == folder, err
    assert not any((folder / "out").iterdir()), f"exit 2 wrote {list((folder / 'out').iterdir())}"
