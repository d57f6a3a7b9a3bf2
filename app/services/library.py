"""The Library: filtering corpora by their labels, renaming and relabelling a corpus, saved comparisons."""

from __future__ import annotations

import json
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from sqlalchemy.engine import Engine

from app.services.ingestion import check_name, parse_labels
from app.store import comparisons as saved
from app.store import corpora as store
from app.store.tables import Corpus

NOTE_LENGTH = 40
"""A label value longer than this is a free-text note: searchable, but not offered as a filter option."""
MAX_OPTIONS = 30
"""A label key with more distinct values than this is treated as free text as well."""
NOTE_KEYS = frozenset({"note", "notes", "comment", "comments", "description"})


@dataclass(frozen=True)
class LabelFilter:
    """The label keys offered as filters, each with its values (free-text keys are left out)."""

    options: dict[str, list[str]]
    free_text_keys: list[str]


def label_filter(summaries: Iterable[dict[str, Any]]) -> LabelFilter:
    """Filter options from the corpora's labels: short values of keys with few values; the rest is free text."""
    values: dict[str, set[str]] = {}
    for summary in summaries:
        for key, value in summary["labels"].items():
            values.setdefault(key, set()).add(value)
    options, free = {}, []
    for key in sorted(values, key=str.casefold):
        found = values[key]
        if (
            key.casefold() in NOTE_KEYS
            or len(found) > MAX_OPTIONS
            or any(len(v) > NOTE_LENGTH for v in found)
        ):
            free.append(key)
        else:
            options[key] = sorted(found, key=str.casefold)
    return LabelFilter(options, free)


def parse_label_choices(choices: Iterable[str]) -> dict[str, set[str]]:
    """'key=value' choices -> {key: {values}} (choices without '=' are ignored)."""
    chosen: dict[str, set[str]] = {}
    for choice in choices:
        if "=" in choice:
            key, value = choice.split("=", 1)
            chosen.setdefault(key, set()).add(value)
    return chosen


def matches(summary: dict[str, Any], chosen: dict[str, set[str]], search: str) -> bool:
    """A corpus matches when, for every chosen key, its value is one of the chosen values (values of one key
    are alternatives, keys combine), and the search text occurs in its name or any label (case-insensitive)."""
    labels = summary["labels"]
    if any(labels.get(key) not in values for key, values in chosen.items()):
        return False
    if search:
        haystack = " ".join([summary["name"], *labels.keys(), *labels.values()]).casefold()
        return search.casefold() in haystack
    return True


def filter_corpora(
    summaries: list[dict[str, Any]], choices: Iterable[str], search: str = ""
) -> list[dict[str, Any]]:
    chosen = parse_label_choices(choices)
    return [s for s in summaries if matches(s, chosen, search.strip())]


def labels_as_text(labels: dict[str, str]) -> str:
    """Labels as the key=value lines the forms take."""
    return "\n".join(f"{k}={v}" for k, v in labels.items())


def rename_and_relabel(
    engine: Engine, corpus_id: int, name: str | None = None, labels: str | dict | None = None
) -> dict[str, Any]:
    """Give a corpus a new name and/or labels (key=value lines or a JSON object); returns its summary.
    Its counts, fits and saved comparisons are untouched (a comparison keeps the name it was saved with)."""
    new_name = None if name is None else check_name(name)
    new_labels = None if labels is None else parse_labels(labels)
    store.update_corpus(engine, corpus_id, new_name, new_labels)
    return store.summary(store.get_corpus(engine, corpus_id))


def same_content(engine: Engine, corpus: Corpus) -> list[dict[str, Any]]:
    """The other corpora counted from the same content (the same SHA-256 of the text, or of the counts for
    word-count lists and spectra), oldest first: a re-upload says so and offers them, and stays a corpus of
    its own (uploading again on purpose, e.g. with another profile or other labels, is allowed)."""
    return [
        {"id": cid, "name": name, "url": f"/corpora/{cid}", "counted_at": counted.isoformat()}
        for cid, name, counted in store.same_content(engine, corpus)
    ]


def delete_comparison(engine: Engine, slug: str) -> None:
    """Delete a saved comparison (the caller checks who may: its creator or an admin)."""
    saved.delete_comparison(engine, slug)


def saved_comparisons(engine: Engine) -> list[dict[str, Any]]:
    """Every saved comparison, newest first: slug, address, corpora names, common size, when, who, public."""
    out = []
    for row in saved.list_comparisons(engine):
        snapshot = json.loads(row.snapshot_json)
        out.append(
            {
                "slug": row.slug,
                "url": f"/compare/{row.slug}",
                "corpora": [c["name"] for c in snapshot.get("corpora", [])],
                "common_size": snapshot.get("size_matched", {}).get("tokens"),
                "saved_at": row.created_at.isoformat(),
                "creator_id": row.creator_id,
                "public": row.public,
                "program_version": row.program_version,
            }
        )
    return out
