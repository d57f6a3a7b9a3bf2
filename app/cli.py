"""Command line: serve the dashboard, ingest files, list corpora, export a spectrum."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated

import typer

app = typer.Typer(
    help="Lexigrowth: word-frequency spectra and vocabulary growth for comparing corpora.",
    no_args_is_help=True,
    add_completion=False,
)


def _settings(data_dir: Path | None):
    from app.config import Settings, get_settings

    return Settings(data_dir=data_dir) if data_dir else get_settings()


DataDir = Annotated[
    Path | None, typer.Option("--data-dir", help="Folder of the SQLite store (LEXIGROWTH_DATA_DIR).")
]


@app.command()
def serve(
    host: Annotated[str, typer.Option(help="Address to listen on.")] = "127.0.0.1",
    port: Annotated[int, typer.Option(help="Port to listen on.")] = 8000,
    data_dir: DataDir = None,
) -> None:
    """Start the dashboard (demo corpora are loaded into an empty store)."""
    import uvicorn

    from app.main import create_app

    settings = _settings(data_dir)
    typer.echo(f"Lexigrowth on http://{host}:{port}  (store: {settings.resolved_database_url})")
    uvicorn.run(create_app(settings), host=host, port=port, log_level="info")


@app.command()
def ingest(
    files: Annotated[list[Path], typer.Argument(help="Text files forming one corpus, in order.")],
    name: Annotated[str, typer.Option("--name", help="Name of the corpus.")],
    label: Annotated[
        list[str] | None, typer.Option("--label", help="A label key=value (repeatable).")
    ] = None,
    profile: Annotated[str, typer.Option(help="Tokenization profile name.")] = "default",
    data_dir: DataDir = None,
) -> None:
    """Count FILES as one corpus and store it."""
    from app.ingest.profiles import get_profile
    from app.ingest.readers import TextSource, UnreadableFileError
    from app.services.ingestion import IngestionInputError, parse_labels
    from app.services.ingestion import ingest as run_ingest
    from app.store.corpora import get_corpus, summary
    from app.store.db import make_engine

    settings = _settings(data_dir)
    engine = make_engine(settings.resolved_database_url)
    try:
        sources = [TextSource.from_path(f) for f in files]
        labels = parse_labels("\n".join(label or []))
        chosen = get_profile(profile)
        total = sum(s.size for s in sources)
        with typer.progressbar(length=max(total, 1), label="counting", file=sys.stderr) as bar:
            last = [0]

            def progress(done: int, _total: int) -> None:
                bar.update(done - last[0])
                last[0] = done

            corpus_id = run_ingest(engine, sources, name, labels, chosen, progress, settings.work_dir)
    except (UnreadableFileError, IngestionInputError, ValueError, FileNotFoundError) as exc:
        typer.echo(f"error: {exc}", err=True)
        raise typer.Exit(code=2) from exc
    s = summary(get_corpus(engine, corpus_id))
    typer.echo(
        f"stored corpus {corpus_id} '{s['name']}': {s['tokens']:,} tokens, {s['types']:,} types, "
        f"{s['hapaxes']:,} hapax legomena"
    )


@app.command("list")
def list_command(data_dir: DataDir = None) -> None:
    """List the stored corpora."""
    from app.store.corpora import list_corpora, summary
    from app.store.db import make_engine

    engine = make_engine(_settings(data_dir).resolved_database_url)
    typer.echo(f"{'id':>4}  {'tokens':>12}  {'types':>10}  {'hapax':>6}  name")
    for corpus in list_corpora(engine):
        s = summary(corpus)
        typer.echo(
            f"{s['id']:>4}  {s['tokens']:>12,}  {s['types']:>10,}  {s['hapax_share']:>6.1%}  {s['name']}"
        )


@app.command()
def export(
    corpus_id: Annotated[int, typer.Argument(help="Corpus id (see 'list').")], data_dir: DataDir = None
) -> None:
    """Print the frequency spectrum of a corpus as TSV (m, V_m)."""
    from app.services.export import spectrum_tsv
    from app.store.corpora import CorpusNotFoundError, get_corpus, spectrum_pairs
    from app.store.db import make_engine

    engine = make_engine(_settings(data_dir).resolved_database_url)
    try:
        get_corpus(engine, corpus_id)
    except CorpusNotFoundError as exc:
        typer.echo(f"error: {exc}", err=True)
        raise typer.Exit(code=2) from exc
    sys.stdout.write(spectrum_tsv(spectrum_pairs(engine, corpus_id)))


def main() -> None:
    app()
