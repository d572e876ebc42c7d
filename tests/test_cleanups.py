"""Regression tests of the cleanup pass (status styling, the scan view's accessor, old run directories, clusters).

Each test's docstring names the cleanup item it covers ("cleanup item N": the list of known items left from the
previous session, numbered as in the task that fixed them; "user pass": defects found trying the tool as a new user).
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


# --------------------------------------------------------------------------
# cleanup item 2: status words styled from the one table
# --------------------------------------------------------------------------

def test_every_status_word_has_a_style():
    """Cleanup item 2: the UI styles status words by their tone, read from the session's table of words (engine
    words and session words); every word has a tone, and every tone a style of its own."""
    from cubage.engine.statuses import STATUSES
    from cubage.session.status import SESSION_WORDS, TONES, WORDS, tone
    from cubage.tui.widgets.readout import TONE_STYLE, status_style
    assert set(WORDS) == set(STATUSES) | set(SESSION_WORDS)
    for word in WORDS:
        assert tone(word) in TONES, word
        assert status_style(word) == TONE_STYLE[tone(word)], word
    assert set(TONE_STYLE) == set(TONES)
    assert len(set(TONE_STYLE.values())) == len(TONES)          # tones are told apart
    # what the tones mean (the module docstring of cubage.session.status)
    assert tone("converged") == "met" and tone("failed") == "fault" and tone("runner-gone") == "fault"
    assert tone("budget-spent") == "short" and tone("running") == "active" and tone("ready") == "idle"
    assert tone("no-such-word") == "" and status_style("no-such-word") == "bold"


def test_the_text_ui_keeps_no_table_of_status_words():
    """Cleanup item 2: no module of the text UI holds its own table (dict, set, list or tuple literal) of three or
    more status words; the words are listed in cubage.engine.statuses and cubage.session.status only."""
    from cubage.session.status import WORDS
    offenders = []
    for path in sorted((ROOT / "tui").rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node in ast.walk(tree):
            items = node.keys if isinstance(node, ast.Dict) else \
                node.elts if isinstance(node, (ast.Set, ast.List, ast.Tuple)) else []
            words = [k.value for k in items if isinstance(k, ast.Constant) and k.value in WORDS]
            if len(words) >= 3:
                offenders.append(f"{path.name}:{node.lineno} {words}")
    assert not offenders, offenders
