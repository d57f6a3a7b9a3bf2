"""Command line: serve the dashboard, ingest files, list corpora, export a spectrum, manage lab members."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Literal

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


def _engine(data_dir: Path | None):
    from app.store.db import make_engine

    return make_engine(_settings(data_dir).resolved_database_url)


@app.command()
def serve(
    host: Annotated[str, typer.Option(help="Address to listen on.")] = "127.0.0.1",
    port: Annotated[int, typer.Option(help="Port to listen on.")] = 8000,
    data_dir: DataDir = None,
) -> None:
    """Start the dashboard (demo corpora are loaded into an empty store).

    Listening on an address other than this computer's own (127.0.0.1, ::1, localhost) needs lab mode: it is
    refused while the store has no account ('lexigrowth user add NAME --admin').
    """
    import uvicorn

    from app.main import create_app
    from app.store.accounts import any_account
    from app.web.security import is_loopback

    settings = _settings(data_dir)
    lab = any_account(_engine(data_dir))
    if not is_loopback(host) and not lab:
        typer.echo(
            f"error: refusing to listen on {host}: without accounts the dashboard has no sign-in, and anyone "
            "who can reach it would read and change every corpus. Add a member first "
            "('lexigrowth user add NAME --admin'), or listen on 127.0.0.1.",
            err=True,
        )
        raise typer.Exit(code=2)
    mode = "lab mode: members sign in" if lab or settings.mode == "lab" else "personal mode: no sign-in"
    typer.echo(f"Lexigrowth on http://{host}:{port}  ({mode}; store: {settings.resolved_database_url})")
    uvicorn.run(
        create_app(settings),
        host=host,
        port=port,
        log_level="info",
        proxy_headers=settings.trust_proxy,  # X-Forwarded-* from FORWARDED_ALLOW_IPS (default 127.0.0.1)
    )


@app.command()
def ingest(
    files: Annotated[list[Path], typer.Argument(help="Text files forming one corpus, in order.")],
    name: Annotated[str, typer.Option("--name", help="Name of the corpus.")],
    label: Annotated[
        list[str] | None, typer.Option("--label", help="A label key=value (repeatable).")
    ] = None,
    profile: Annotated[str, typer.Option(help="Tokenization profile name.")] = "default",
    data_dir: DataDir = None,
    count_engine: Annotated[
        Literal["serial", "local", "dask"] | None,
        typer.Option(
            "--engine",
            help="Where to tokenize: this process, worker processes on all cores, or a Dask cluster "
            "(default: by input size, or dask with --scheduler).",
        ),
    ] = None,
    scheduler: Annotated[
        str | None,
        typer.Option(
            "--scheduler",
            metavar="ADDRESS",
            help="Address of a running Dask scheduler (tcp://host:8786) for the dask engine.",
        ),
    ] = None,
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

            corpus_id = run_ingest(
                engine,
                sources,
                name,
                labels,
                chosen,
                progress,
                settings.work_dir,
                counting_engine=count_engine,
                scheduler=scheduler,
            )
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
    """Print the frequency spectrum of a corpus as TSV: a commented header (corpus, profile, tokens, types,
    version), then the columns occurrences and types."""
    from app.services.export import spectrum_tsv
    from app.store.corpora import CorpusNotFoundError, get_corpus, spectrum_pairs
    from app.store.db import make_engine

    engine = make_engine(_settings(data_dir).resolved_database_url)
    try:
        corpus = get_corpus(engine, corpus_id)
    except CorpusNotFoundError as exc:
        typer.echo(f"error: {exc}", err=True)
        raise typer.Exit(code=2) from exc
    sys.stdout.write(spectrum_tsv(spectrum_pairs(engine, corpus_id), corpus))


# ------------------------------------------------------------------------------------------ lab members

users = typer.Typer(
    help="Lab members: the accounts that sign in to the dashboard (lab mode), and their API tokens.",
    no_args_is_help=True,
)
app.add_typer(users, name="user")

MemberName = Annotated[str, typer.Argument(help="Sign-in name: letters, digits, '.', '_' or '-'.")]
PasswordStdin = Annotated[
    bool,
    typer.Option(
        "--password-stdin", help="Read the password from the first line of standard input instead of asking."
    ),
]


def _password(from_stdin: bool) -> str:
    """The new password: one line of standard input, or typed twice without echo."""
    if from_stdin:
        return sys.stdin.readline().rstrip("\r\n")
    return typer.prompt("Password", hide_input=True, confirmation_prompt=True)


def _fail(exc: Exception) -> typer.Exit:
    typer.echo(f"error: {exc}", err=True)
    return typer.Exit(code=2)


@users.command("add")
def user_add(
    name: MemberName,
    admin: Annotated[bool, typer.Option("--admin", help="May also delete corpora of other members.")] = False,
    password_stdin: PasswordStdin = False,
    data_dir: DataDir = None,
) -> None:
    """Add a member. From the first account on, the dashboard asks everyone to sign in."""
    from app.store.accounts import AccountError, add_account, check_name

    try:
        member = add_account(_engine(data_dir), check_name(name), _password(password_stdin), admin)
    except AccountError as exc:
        raise _fail(exc) from exc
    typer.echo(f"added {'admin' if member.is_admin else 'member'} {member.name} (lab mode: sign-in required)")


@users.command("list")
def user_list(data_dir: DataDir = None) -> None:
    """List the members with their role and number of API tokens."""
    from app.store.accounts import list_accounts

    typer.echo(f"{'id':>4}  {'role':<6}  {'tokens':>6}  name")
    for member, tokens in list_accounts(_engine(data_dir)):
        typer.echo(
            f"{member.id:>4}  {'admin' if member.is_admin else 'member':<6}  {tokens:>6}  {member.name}"
        )


@users.command("password")
def user_password(name: MemberName, password_stdin: PasswordStdin = False, data_dir: DataDir = None) -> None:
    """Set a new password for a member (their open sessions end)."""
    from app.store.accounts import AccountError, member_exists, set_password

    engine = _engine(data_dir)
    try:
        if not member_exists(engine, name):
            raise AccountError(f"no account called {name!r}")
        set_password(engine, name, _password(password_stdin))
    except AccountError as exc:
        raise _fail(exc) from exc
    typer.echo(f"new password set for {name}")


@users.command("token")
def user_token(
    name: MemberName,
    revoke: Annotated[
        bool, typer.Option("--revoke", help="Delete every API token of the member instead of making one.")
    ] = False,
    data_dir: DataDir = None,
) -> None:
    """Print a new API token for a member, shown only once (the store keeps its hash).

    Scripts send it in the header 'Authorization: Bearer TOKEN'.
    """
    from app.store.accounts import AccountError, new_token, revoke_tokens

    try:
        if revoke:
            typer.echo(f"revoked {revoke_tokens(_engine(data_dir), name)} API token(s) of {name}")
            return
        token = new_token(_engine(data_dir), name)
    except AccountError as exc:
        raise _fail(exc) from exc
    typer.echo(f"API token for {name} (shown only this once):", err=True)
    typer.echo(token)


def main() -> None:
    app()
