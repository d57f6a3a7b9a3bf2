"""Command line: serve the dashboard, ingest files, list corpora, export a spectrum, manage lab members."""

from __future__ import annotations

import ipaddress
import os
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


SHUTDOWN_SECONDS = 2
"""Seconds a stopping server (SIGTERM, Ctrl-C) gives open requests before it closes them."""

DataDir = Annotated[
    Path | None, typer.Option("--data-dir", help="Folder of the SQLite store (LEXIGROWTH_DATA_DIR).")
]


def _engine(data_dir: Path | None):
    from app.services.corpora import open_store

    return open_store(_settings(data_dir).resolved_database_url)


def is_loopback(host: str) -> bool:
    """Whether a listening address is reachable from this machine only."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def _every_address(host: str) -> bool:
    """Whether a listening address is every address of the machine (0.0.0.0, ::)."""
    try:
        return ipaddress.ip_address(host.strip("[]")).is_unspecified
    except ValueError:
        return False


@app.command()
def serve(
    host: Annotated[str, typer.Option(help="Address to listen on.")] = "127.0.0.1",
    port: Annotated[int, typer.Option(help="Port to listen on.")] = 8000,
    data_dir: DataDir = None,
    workers: Annotated[
        int,
        typer.Option(
            min=1,
            max=64,
            help="Server processes sharing the port and the store (each with its own task worker).",
        ),
    ] = 1,
) -> None:
    """Start the dashboard (demo corpora are queued for counting into an empty store; the server answers
    at once and the Library shows them arriving).

    Listening on an address other than this computer's own (127.0.0.1, ::1, localhost) needs lab mode: it is
    refused while the store has no account ('lexigrowth user add NAME --admin'). The server answers only
    for loopback names, the address it listens on and the names in LEXIGROWTH_ALLOWED_HOSTS; listening on
    every address (0.0.0.0, ::) needs those names. Behind a reverse proxy, LEXIGROWTH_TRUSTED_PROXIES lists
    its address: uvicorn then takes the client's address and scheme from its X-Forwarded-For and
    X-Forwarded-Proto, and from no one else's.
    """
    import uvicorn

    from app.config import LOOPBACK_NAMES
    from app.main import create_app
    from app.services.accounts import lab_mode_on

    settings = _settings(data_dir)
    lab = lab_mode_on(_engine(data_dir))
    if not is_loopback(host) and not lab:
        typer.echo(
            f"error: refusing to listen on {host}: without accounts the dashboard has no sign-in, and anyone "
            "who can reach it would read and change every corpus. Add a member first "
            "('lexigrowth user add NAME --admin'), or listen on 127.0.0.1.",
            err=True,
        )
        raise typer.Exit(code=2)
    names = settings.host_names
    if _every_address(host):
        if not names:
            typer.echo(
                f"error: listening on {host} (every address of this machine) needs the host names members "
                "type in their browsers: set LEXIGROWTH_ALLOWED_HOSTS (comma-separated, e.g. "
                "lab.example.org,192.0.2.10). Requests for any other name are refused, so that a page of "
                "another site cannot reach the dashboard under its own name (DNS rebinding).",
                err=True,
            )
            raise typer.Exit(code=2)
    elif host.strip("[]").lower() not in LOOPBACK_NAMES:
        names = [*names, host.strip("[]").lower()]  # the address it listens on is a name members may use
    settings = settings.model_copy(update={"allowed_hosts": ",".join(names)})
    mode = "lab mode: members sign in" if lab or settings.mode == "lab" else "personal mode: no sign-in"
    typer.echo(
        f"Lexigrowth on http://{host}:{port}  ({mode}; store: {settings.resolved_database_url}; "
        f"{workers} server process{'es' if workers > 1 else ''})"
    )
    typer.echo(
        f"Answers for the host names {', '.join(sorted(LOOPBACK_NAMES) + names)}; proxies trusted for "
        f"X-Forwarded-*: {', '.join(settings.proxy_addresses) or 'none'}"
    )
    options = {
        "host": host,
        "port": port,
        "log_level": "info",
        # The client's address and scheme from X-Forwarded-* only when the connection comes from a listed
        # proxy (uvicorn takes the nearest address that proxy did not add itself); else the connection's.
        "proxy_headers": bool(settings.proxy_addresses),
        "forwarded_allow_ips": ",".join(settings.proxy_addresses) or None,
        "timeout_graceful_shutdown": SHUTDOWN_SECONDS,
    }
    if workers == 1:
        uvicorn.run(create_app(settings), **options)
        return
    # Each server process makes its own app from the environment: pass the data folder and names on.
    os.environ["LEXIGROWTH_DATA_DIR"] = str(settings.data_dir.resolve())
    os.environ["LEXIGROWTH_ALLOWED_HOSTS"] = settings.allowed_hosts
    uvicorn.run("app.main:create_app", factory=True, workers=workers, **options)


@app.command()
def ingest(
    files: Annotated[list[Path], typer.Argument(help="Files forming one corpus, in order.")],
    name: Annotated[
        str | None, typer.Option("--name", help="Name of the corpus (a bundle keeps its own without it).")
    ] = None,
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
    fit: Annotated[
        bool,
        typer.Option(
            "--fit/--no-fit",
            help="Fit the models now (default), or leave them to the task worker of a running server.",
        ),
    ] = True,
    kind: Annotated[
        Literal["text", "word-counts", "spectrum", "bundle"],
        typer.Option(
            "--kind",
            help="What FILES hold: texts, CSV/TSV word counts (word, count), a frequency spectrum "
            "(frequency, types) or one corpus bundle from 'export --bundle'.",
        ),
    ] = "text",
    text_separator: Annotated[
        str,
        typer.Option(
            "--text-separator",
            help="Where the texts of a file end: file (each file is one text), paragraph (blank lines), "
            "line (one text per line), or a marker line such as '###'.",
        ),
    ] = "file",
) -> None:
    """Count FILES as one corpus (or read them as counts, a spectrum or a bundle), store it, fit its models."""
    from app.services.ingestion import IngestionInputError, parse_labels
    from app.services.sources import INPUT_ERRORS, profile_named

    settings = _settings(data_dir)
    engine = _engine(data_dir)
    try:
        labels = parse_labels("\n".join(label or []))
        chosen = profile_named(profile)
        if kind == "text":
            corpus_id = _ingest_texts(
                engine, settings, files, name or "", labels, chosen, count_engine, scheduler, text_separator
            )
        elif text_separator != "file":
            raise IngestionInputError("--text-separator: only files of texts are split into texts")
        else:
            corpus_id = _ingest_counts(engine, kind, files, name, labels, chosen)
    except (*INPUT_ERRORS, FileNotFoundError) as exc:
        typer.echo(f"error: {exc}", err=True)
        raise typer.Exit(code=2) from exc
    _report_and_fit(engine, settings, corpus_id, fit)


def _ingest_counts(engine, kind: str, files: list[Path], name: str | None, labels: dict, profile) -> int:
    """Word-count lists, spectrum tables or one bundle as a corpus (``app.services.exchange``)."""
    from app.services.exchange import ingest_counts

    for path in files:
        if not path.is_file():
            raise FileNotFoundError(f"{path}: file not found")
    return ingest_counts(engine, kind, [(p, p.name) for p in files], name, labels, profile)


def _ingest_texts(
    engine, settings, files, name: str, labels: dict, profile, count_engine, scheduler, text_separator: str
) -> int:
    """Texts counted with a progress bar on standard error."""
    from app.services.ingestion import ingest as run_ingest
    from app.services.sources import text_file

    sources = [text_file(f) for f in files]
    total = sum(s.size for s in sources)
    with typer.progressbar(length=max(total, 1), label="counting", file=sys.stderr) as bar:
        last = [0]

        def progress(done: int, _total: int) -> None:
            bar.update(done - last[0])
            last[0] = done

        return run_ingest(
            engine,
            sources,
            name,
            labels,
            profile,
            progress,
            settings.work_dir,
            counting_engine=count_engine,
            scheduler=scheduler,
            text_separator=text_separator,
        )


def _report_and_fit(engine, settings, corpus_id: int, fit: bool) -> None:
    """Print the new corpus's totals and fit its models now (or leave them queued)."""
    from app.services.corpora import lookup, summary
    from app.services.jobs import failed
    from app.services.modelling import PredictionError, model_report
    from app.services.tasks import queue_models, run_now

    s = summary(lookup(engine, corpus_id))
    typer.echo(
        f"stored corpus {corpus_id} '{s['name']}': {s['tokens']:,} tokens, {s['types']:,} types, "
        f"{s['hapaxes']:,} hapax legomena"
    )
    task = queue_models(engine, corpus_id)
    if not fit:
        typer.echo("models queued: a running server's task worker will fit them")
        return
    typer.echo("fitting models...", err=True)
    ended = run_now(engine, task, settings.work_dir)
    if failed(ended):
        typer.echo(f"models: {ended.message}")
        return
    try:
        report = model_report(engine, corpus_id)
    except PredictionError as exc:  # the reason no model could be fitted, stored with the corpus
        typer.echo(f"models: {exc}")
        return
    typer.echo(f"models fitted: {', '.join(report['fitted'])}; recommended model ready")


@app.command("list")
def list_command(data_dir: DataDir = None) -> None:
    """List the stored corpora."""
    from app.services.corpora import summaries

    typer.echo(f"{'id':>4}  {'tokens':>12}  {'types':>10}  {'hapax':>6}  name")
    for s in summaries(_engine(data_dir)):
        typer.echo(
            f"{s['id']:>4}  {s['tokens']:>12,}  {s['types']:>10,}  {s['hapax_share']:>6.1%}  {s['name']}"
        )


@app.command()
def export(
    corpus_id: Annotated[int, typer.Argument(help="Corpus id (see 'list').")],
    data_dir: DataDir = None,
    bundle: Annotated[
        bool,
        typer.Option(
            "--bundle", help="Write the whole corpus as a bundle (gzip JSON) for 'ingest --kind bundle'."
        ),
    ] = False,
    output: Annotated[
        Path | None, typer.Option("--output", "-o", help="Write to this file instead of standard output.")
    ] = None,
) -> None:
    """Print the frequency spectrum of a corpus as TSV: a commented header (corpus, profile, tokens, types,
    version), then the columns occurrences and types; with --bundle, the whole corpus as a bundle."""
    from app.services.corpora import CorpusNotFoundError, lookup, spectrum
    from app.services.exchange import export_bundle
    from app.services.export import spectrum_tsv

    engine = _engine(data_dir)
    try:
        corpus = lookup(engine, corpus_id)
    except CorpusNotFoundError as exc:
        typer.echo(f"error: {exc}", err=True)
        raise typer.Exit(code=2) from exc
    data = (
        export_bundle(engine, corpus_id)
        if bundle
        else spectrum_tsv(spectrum(engine, corpus_id), corpus).encode("utf-8")
    )
    if output is not None:
        output.write_bytes(data)
        return
    sys.stdout.flush()
    sys.stdout.buffer.write(data)
    sys.stdout.buffer.flush()


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
    from app.services.accounts import AccountError, add_member, check_name

    try:
        member = add_member(_engine(data_dir), check_name(name), _password(password_stdin), admin)
    except AccountError as exc:
        raise _fail(exc) from exc
    typer.echo(f"added {'admin' if member.is_admin else 'member'} {member.name} (lab mode: sign-in required)")


@users.command("list")
def user_list(data_dir: DataDir = None) -> None:
    """List the members with their role and number of API tokens."""
    from app.services.accounts import members

    typer.echo(f"{'id':>4}  {'role':<6}  {'tokens':>6}  name")
    for member, tokens in members(_engine(data_dir)):
        typer.echo(
            f"{member.id:>4}  {'admin' if member.is_admin else 'member':<6}  {tokens:>6}  {member.name}"
        )


@users.command("password")
def user_password(
    name: MemberName,
    password_stdin: PasswordStdin = False,
    revoke_tokens: Annotated[
        bool | None,
        typer.Option(
            "--revoke-tokens/--keep-tokens",
            help="Also revoke the member's API tokens, or keep them (asked when neither is given and the "
            "member has tokens).",
        ),
    ] = None,
    data_dir: DataDir = None,
) -> None:
    """Set a new password for a member: every session of theirs ends; their API tokens are revoked or kept."""
    from app.services.accounts import AccountError, member_exists, members, set_password

    engine = _engine(data_dir)
    try:
        if not member_exists(engine, name):
            raise AccountError(f"no account called {name!r}")
        password = _password(password_stdin)
        tokens = next(n for member, n in members(engine) if member.name == name)
        if revoke_tokens is None:
            revoke_tokens = bool(tokens) and typer.confirm(
                f"{name} has {tokens} API token(s), which keep working after a password change. Revoke them?",
                default=True,
            )
        change = set_password(engine, name, password, revoke_tokens=revoke_tokens)
    except AccountError as exc:
        raise _fail(exc) from exc
    typer.echo(f"new password set for {name}; {change.sessions_ended} signed-in session(s) ended")
    if change.tokens_revoked:
        typer.echo(f"revoked {change.tokens_revoked} API token(s) of {name}")
    elif change.tokens_kept:
        typer.echo(
            f"kept {change.tokens_kept} API token(s) of {name}: they still work "
            f"(revoke them with: lexigrowth user token {name} --revoke)"
        )


@users.command("unlock")
def user_unlock(
    name: Annotated[str | None, typer.Argument(help="Forget the failed sign-ins of this name.")] = None,
    address: Annotated[
        str | None, typer.Option("--address", help="Forget the failed sign-ins from this client address.")
    ] = None,
    data_dir: DataDir = None,
) -> None:
    """Forget failed sign-ins (of a name from every address, of an address, or all of them with neither),
    so that nobody has to wait before signing in again."""
    from app.services.accounts import forget_failed_sign_ins

    forgotten = forget_failed_sign_ins(_engine(data_dir), name, address)
    typer.echo(f"forgot the failed sign-ins of {forgotten} name and address pair(s) or address(es)")


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
    from app.services.accounts import AccountError, new_token, revoke_tokens

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
