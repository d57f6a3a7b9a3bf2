"""Cached model reports follow the code that computes them: a report stored by other code is computed again."""

from __future__ import annotations

import shutil
from pathlib import Path

from app.services import modelling
from app.store import corpora as store
from tests.web.test_lab_mode import post_text, words_of

CORE = Path(modelling.core_package.__file__).parent


def test_fingerprint_changes_with_any_modelling_source(tmp_path):
    copy = tmp_path / "core"
    shutil.copytree(CORE, copy, ignore=shutil.ignore_patterns("__pycache__"))
    service = tmp_path / "modelling.py"
    shutil.copy(modelling.__file__, service)
    same = modelling.code_fingerprint([copy, service])
    assert same == modelling.code_fingerprint(modelling.MODELLING_SOURCES)
    assert modelling.CACHE_KEY.endswith(same)

    backtest = copy / "backtest.py"
    backtest.write_text(backtest.read_text() + "\nTHRESHOLD = 0.5\n")
    edited_core = modelling.code_fingerprint([copy, service])

    (copy / "models" / "new_model.py").write_text('"""A model added later."""\n')
    added_model = modelling.code_fingerprint([copy, service])

    service.write_text(service.read_text().replace("RANDOM_GROWTH_POINTS = 60", "RANDOM_GROWTH_POINTS = 61"))
    edited_service = modelling.code_fingerprint([copy, service])
    assert len({same, edited_core, added_model, edited_service}) == 4


def test_a_report_stored_by_other_code_is_computed_again(client, monkeypatch):
    engine = client.app.state.engine
    current = modelling.CACHE_KEY
    monkeypatch.setattr(modelling, "CACHE_KEY", "0.1.0+code-0123456789abcdef")  # as an older program left it
    corpus = post_text(client, "Field notes", words_of(0, 2500)).json()["id"]
    old = store.cached_result(engine, corpus, modelling.MODELS_KIND, modelling.CACHE_KEY)
    assert old is not None and "error" not in old

    store.store_cached_result(engine, corpus, modelling.MODELS_KIND, modelling.CACHE_KEY, old | {"marker": 1})
    monkeypatch.setattr(modelling, "CACHE_KEY", current)  # the program is updated
    assert not modelling.has_model_report(engine, corpus)

    answer = client.get(f"/api/corpora/{corpus}/models")  # the view queues the report (run at once in tests)
    assert answer.status_code == 200, answer.text
    fresh = store.cached_result(engine, corpus, modelling.MODELS_KIND, current)
    assert fresh is not None and "marker" not in fresh
    assert store.cached_result(engine, corpus, modelling.MODELS_KIND, "0.1.0+code-0123456789abcdef") is None
