"""The ``treewright`` command line: serve, demo, import, export, users, assignment, backup.

Every command that touches the database takes ``--data-dir`` (default ``./data`` or
``TREEWRIGHT_DATA_DIR``); ``TREEWRIGHT_DATABASE_URL`` points it at PostgreSQL instead. The
database is brought to the newest schema before any command uses it. Service errors end the
command with exit status 1 and a one-line message saying what and where.

The parser's own commands (``train``, ``parse``, ``score``) are registered here too; they work
on files and need no database.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any, TypeVar

import click

from app.settings import Settings
from app.wording import plural

if TYPE_CHECKING:  # the database layer and the parser load only in the commands that use them
    from sqlalchemy.orm import Session

    from app.models import Corpus

#: The roles, as app.models names them (spelled out here so that ``--help`` loads no
#: database code; tests/app/test_cli_startup.py checks that the two agree).
ROLES = ("admin", "adjudicator", "annotator")

F = TypeVar("F", bound=Callable[..., Any])
#: Imports with more sentences than this show a progress bar.
PROGRESS_MIN = 300


def data_dir_option(func: F) -> F:
    return click.option(
        "--data-dir",
        type=click.Path(file_okay=False, path_type=Path),
        default=None,
        help="Folder of the SQLite database, secret key and backups "
        "[default: ./data or TREEWRIGHT_DATA_DIR].",
    )(func)


def make_settings(data_dir: Path | None, **overrides: Any) -> Settings:
    values = {k: v for k, v in overrides.items() if v is not None}
    if data_dir is not None:
        values["data_dir"] = data_dir
    return Settings(**values)


@contextmanager
def open_db(settings: Settings) -> Iterator[Session]:
    """A session on the migrated database; the engine is closed afterwards."""
    from app.db import make_engine, make_sessionmaker, upgrade_to_head

    upgrade_to_head(settings)
    engine = make_engine(settings)
    db = make_sessionmaker(engine)()
    try:
        yield db
    finally:
        db.close()
        engine.dispose()


@contextmanager
def friendly_errors() -> Iterator[None]:
    """Service errors become a one-line message and exit status 1."""
    from app.services.errors import ServiceError

    try:
        yield
    except ServiceError as err:
        raise click.ClickException(str(err.detail)) from None


def corpus_named(db: Session, name: str) -> Corpus:
    from sqlalchemy import select

    from app.models import Corpus

    corpus = db.scalar(select(Corpus).where(Corpus.name == " ".join(name.split())))
    if corpus is None:
        known = ", ".join(repr(n) for n in db.scalars(select(Corpus.name).order_by(Corpus.name)))
        raise click.ClickException(
            f"no corpus named {name!r}" + (f" (there are: {known})" if known else " (none yet)")
        )
    return corpus


class _Commands(click.Group):
    """The command group; the parser's commands (``train``, ``parse``, ``score``) are imported
    only when one of them runs or the command list is shown, since loading the parser (numba,
    NLTK) takes longer than most commands themselves."""

    LAZY = {
        "train": ("parser.cli_parse", "train_command"),
        "parse": ("parser.cli_parse", "parse_command"),
        "score": ("parser.cli_score", "score"),
    }

    def list_commands(self, ctx: click.Context) -> list[str]:
        return sorted([*super().list_commands(ctx), *self.LAZY])

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name in self.LAZY:
            import importlib

            module, name = self.LAZY[cmd_name]
            command: click.Command = getattr(importlib.import_module(module), name)
            return command
        return super().get_command(ctx, cmd_name)


@click.group(cls=_Commands, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="treewright")
def main() -> None:
    """Treewright: build a constituency treebank with a parser in the loop."""


# ---------------------------------------------------------------------------------------------
# serving


def _serve(settings: Settings, host: str, port: int, workers: int) -> None:
    import uvicorn

    from app.main import create_app

    click.echo(f"Treewright serves on http://{host}:{port}  (Ctrl-C stops it)")
    if workers > 1:
        # Workers build their own app from the environment, so hand the settings over there.
        os.environ["TREEWRIGHT_DATA_DIR"] = str(settings.data_dir.resolve())
        if settings.database_url:
            os.environ["TREEWRIGHT_DATABASE_URL"] = settings.database_url
        from app.db import upgrade_to_head

        upgrade_to_head(settings)  # once, before the workers race to do it
        # proxy headers as with one worker: X-Forwarded-For is believed from 127.0.0.1 only
        # (a reverse proxy on this machine), so the per-address login delay sees real clients
        uvicorn.run(
            "app.main:create_app",
            factory=True,
            host=host,
            port=port,
            workers=workers,
            log_level="info",
            proxy_headers=True,
        )
        return
    uvicorn.run(create_app(settings), host=host, port=port, log_level="info")


@main.command()
@click.option("--host", default=None, help="Address to bind [default: 127.0.0.1].")
@click.option(
    "--port", type=click.IntRange(1, 65535), default=None, help="Port to listen on [default: 8000]."
)
@click.option(
    "--workers",
    type=click.IntRange(1, 64),
    default=1,
    show_default=True,
    help="Worker processes (use more than one only with PostgreSQL).",
)
@data_dir_option
def serve(host: str | None, port: int | None, workers: int, data_dir: Path | None) -> None:
    """Run the web service."""
    settings = make_settings(data_dir, host=host, port=port)
    if workers > 1 and settings.is_sqlite:
        click.echo(
            "note: several workers on SQLite serialize every write; PostgreSQL is the better fit",
            err=True,
        )
    _serve(settings, settings.host, settings.port, workers)


@main.command()
@click.option(
    "--name", default=None, help="Name in the queue's records and logs [default: host:pid]."
)
@data_dir_option
def worker(name: str | None, data_dir: Path | None) -> None:
    """Run background jobs (grammar training, findings runs) from the PostgreSQL queue.

    For servers with TREEWRIGHT_JOB_RUNNER=workers: start one or more on any machine that
    reaches the database (one job at a time each; more processes run more at once). Ctrl-C
    or SIGTERM stops it after its running job. Needs the `postgres` extra.
    """
    import logging

    settings = make_settings(data_dir)
    if settings.is_sqlite:
        raise click.ClickException(
            "treewright worker needs PostgreSQL: set TREEWRIGHT_DATABASE_URL to "
            "postgresql+psycopg://user@host/dbname (on SQLite each server runs its jobs itself)"
        )
    try:
        from app import jobs
    except ImportError as exc:
        raise click.ClickException(
            f"treewright worker needs the postgres extra ({exc}): "
            "pip install 'treewright[postgres]'"
        ) from None
    from app.db import upgrade_to_head

    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(name)s %(message)s")
    upgrade_to_head(settings)
    label = name or jobs.describe()
    click.echo(f"Treewright worker {label} takes jobs from the queue (Ctrl-C stops it)")
    jobs.run_worker(settings, name=label)


def _wipe(settings: Settings, keep_copy: bool) -> Path | None:
    """Remove the database (SQLite: the file, after a copy when asked; PostgreSQL: every
    table)."""
    if settings.is_sqlite:
        from app.services.backup import backup_sqlite, database_path

        path = database_path(settings)
        kept = None
        if keep_copy and path.exists():
            stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
            kept = backup_sqlite(
                settings, settings.data_dir / "backups" / f"before-demo-{stamp}.db"
            ).path
        for suffix in ("", "-wal", "-shm"):
            Path(str(path) + suffix).unlink(missing_ok=True)
        return kept
    from alembic import command

    from app.db import alembic_config

    command.downgrade(alembic_config(settings), "base")
    return None


@main.command()
@click.option("--host", default=None, help="Address to bind [default: 127.0.0.1].")
@click.option(
    "--port", type=click.IntRange(1, 65535), default=None, help="Port to listen on [default: 8000]."
)
@click.option(
    "--force",
    is_flag=True,
    help="Replace a database that is not a demo (a SQLite copy is kept in DATA_DIR/backups first).",
)
@click.option("--no-serve", is_flag=True, help="Load the demo and stop.")
@click.option(
    "--no-train",
    is_flag=True,
    help="Skip training the first grammar (suggestions come after the first "
    "training). Otherwise it trains in the background while the pages are "
    "served (with --no-serve: in the foreground), its progress printed.",
)
@data_dir_option
def demo(
    host: str | None,
    port: int | None,
    force: bool,
    no_serve: bool,
    no_train: bool,
    data_dir: Path | None,
) -> None:
    """Load fresh demo data (invented ferry cooperative), print the logins, then serve."""
    from app.demo.loader import is_demo_database, load_demo
    from app.demo.progress import ESTIMATE, train_with_progress, watch_in_background
    from app.services.training import request_training

    settings = make_settings(data_dir, host=host, port=port)
    with open_db(settings) as db:
        demo_db = is_demo_database(db)
    if not demo_db and not force:
        raise click.ClickException(
            f"the database at {settings.resolved_database_url} holds data that is not the "
            "demo's; refusing to replace it. Use another --data-dir, or --force (a SQLite "
            "copy is kept in DATA_DIR/backups first)."
        )
    kept = _wipe(settings, keep_copy=not demo_db)
    if kept:
        click.echo(f"kept a copy of the previous database: {kept}")
    with open_db(settings) as db, friendly_errors():
        summary = load_demo(db, train=False)
        version_id = (
            None
            if no_train
            else request_training(db, summary.corpus_id, reason="demo: first grammar").id
        )
    click.echo(
        f"demo loaded: {summary.gold} gold trees and {summary.queued} sentences to "
        f"annotate in {len(summary.documents)} documents "
        f"({summary.assignments} assignments)"
    )
    click.echo("Demo logins (passwords are new on every `treewright demo`):")
    for username, role, password in summary.logins:
        click.echo(f"  {username:<10} {role:<12} {password:<18} {DEMO_DUTIES.get(role, '')}")
    if version_id is None:
        if not no_serve:
            _serve(settings, settings.host, settings.port, 1)
        return
    click.echo(f"Training the first grammar on the {summary.gold} gold trees: {ESTIMATE}.")
    if no_serve:
        train_with_progress(settings, version_id, click.echo)
        return
    click.echo(
        "The pages are served meanwhile; until the grammar is ready the Bench starts "
        "from a flat tree and says that suggestions arrive when it is."
    )
    watch_in_background(settings, version_id, click.echo)
    _serve(settings, settings.host, settings.port, 1)


#: What each demo login is for, printed beside it.
DEMO_DUTIES = {
    "admin": "the adjudicator of this demo: settles disagreements on Review (the other two "
    "annotate every sentence); also corpora, imports and users",
    "annotator": "annotates on the Bench",
    "adjudicator": "annotates; adjudicates only sentences it did not annotate while another "
    "adjudicator exists (corpus setting)",
}


# ---------------------------------------------------------------------------------------------
# import / export


class _Bar:
    """A tqdm bar that appears only for imports larger than PROGRESS_MIN sentences."""

    def __init__(self, label: str) -> None:
        self.label = label
        self.bar: Any = None

    def __call__(self, done: int, total: int) -> None:
        if total <= PROGRESS_MIN:
            return
        if self.bar is None:
            from tqdm import tqdm

            self.bar = tqdm(total=total, desc=self.label, unit="sentence", file=sys.stderr)
        self.bar.update(done - self.bar.n)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


@main.command("import")
@click.argument(
    "files", nargs=-1, required=True, type=click.Path(exists=True, dir_okay=False, path_type=Path)
)
@click.option(
    "--corpus", "corpus_name", required=True, help="Corpus to import into (made when missing)."
)
@click.option(
    "--document",
    "document_name",
    default=None,
    help="Document name [default: each file's name without extension].",
)
@click.option(
    "--as",
    "kind",
    type=click.Choice(["text", "gold", "annotation"]),
    default="text",
    show_default=True,
    help="text: one sentence per line, queued; gold: bracketed trees as gold; "
    "annotation: bracketed trees as --annotator's submitted annotations.",
)
@click.option("--annotator", default=None, help="User name for --as annotation.")
@click.option(
    "--tokenizer",
    type=click.Choice(["whitespace", "treebank"]),
    default="whitespace",
    show_default=True,
    help="How text lines are split into tokens (treebank: NLTK's Treebank-style word tokenizer).",
)
@click.option(
    "--skip-duplicates",
    is_flag=True,
    help="Leave out sentences already in the file or the corpus (default: import "
    "them and report them).",
)
@click.option(
    "--assign",
    "do_assign",
    is_flag=True,
    help="Afterwards, assign the corpus's open sentences to the team.",
)
@data_dir_option
def import_command(
    files: tuple[Path, ...],
    corpus_name: str,
    document_name: str | None,
    kind: str,
    annotator: str | None,
    tokenizer: str,
    skip_duplicates: bool,
    do_assign: bool,
    data_dir: Path | None,
) -> None:
    """Import sentences or bracketed trees; each file is stored whole or not at all."""
    from app.services.assignment import assign_sentences
    from app.services.staged_import import import_path

    if kind == "annotation" and not annotator:
        raise click.UsageError("--as annotation needs --annotator USERNAME")
    if document_name and len(files) > 1:
        raise click.UsageError("--document names one document; give one file with it")
    settings = make_settings(data_dir)
    with open_db(settings) as db:
        for path in files:
            bar = _Bar(path.name)
            try:
                with friendly_errors():
                    result = import_path(
                        db,
                        path,
                        corpus_name=corpus_name,
                        kind=kind,
                        document_name=document_name or path.stem,
                        tokenizer=tokenizer,
                        annotator=annotator,
                        skip_duplicates=skip_duplicates,
                        progress=bar,
                    )
            finally:
                bar.close()
            click.echo(f"{path.name}: {result.summary()}")
            for dup in result.duplicates[:20]:
                click.echo(f"  duplicate: {dup.describe()}")
            if len(result.duplicates) > 20:
                click.echo(f"  ... and {plural(len(result.duplicates) - 20, 'more duplicate')}")
        if do_assign:
            with friendly_errors():
                corpus = corpus_named(db, corpus_name)
                assigned = assign_sentences(db, corpus.id)
            click.echo(assigned.summary())


@main.command("export")
@click.option("--corpus", "corpus_name", required=True, help="Corpus whose gold to export.")
@click.option("--document", "document_name", default=None, help="Only this document.")
@click.option(
    "--strip-function-tags",
    is_flag=True,
    help="Write NP-SBJ-1 as NP (labels such as -LRB- stay whole).",
)
@click.option(
    "--split",
    "ratios",
    default=None,
    metavar="TRAIN/DEV/TEST",
    help="Split into train, dev and test files by these ratios, e.g. 80/10/10.",
)
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of the split.")
@click.option(
    "--by",
    type=click.Choice(["document", "sentence"]),
    default="document",
    show_default=True,
    help="Keep documents whole, or shuffle sentences.",
)
@click.option(
    "--out",
    type=click.Path(path_type=Path),
    default=None,
    help="Output file (without --split; default: standard output) or folder "
    "(with --split; default: the current folder).",
)
@click.option("--zip", "as_zip", is_flag=True, help="With --split: write one .zip file.")
@data_dir_option
def export_command(
    corpus_name: str,
    document_name: str | None,
    strip_function_tags: bool,
    ratios: str | None,
    seed: int,
    by: str,
    out: Path | None,
    as_zip: bool,
    data_dir: Path | None,
) -> None:
    """Export gold trees as bracketed text, one tree per line."""
    from sqlalchemy import select

    from app.models import Document
    from app.services.exports import SplitSpec, export_gold, parse_ratios, record_export, slug

    settings = make_settings(data_dir)
    with open_db(settings) as db, friendly_errors():
        corpus = corpus_named(db, corpus_name)
        document_id = None
        if document_name:
            document_id = db.scalar(
                select(Document.id).where(
                    Document.corpus_id == corpus.id, Document.name == document_name
                )
            )
            if document_id is None:
                raise click.ClickException(f"no document {document_name!r} in {corpus.name!r}")
        split = SplitSpec(parse_ratios(ratios), seed=seed, by=by) if ratios else None
        result = export_gold(
            db,
            corpus.id,
            document_id=document_id,
            function_tags=not strip_function_tags,
            split=split,
        )
        record_export(
            db,
            corpus.id,
            result,
            user=None,
            document_id=document_id,
            split=split,
            function_tags=not strip_function_tags,
        )
    for warning in result.warnings:
        click.echo(f"warning: {warning}", err=True)
    if split is None and not as_zip:
        (text,) = result.files.values()
        if out is None:
            click.echo(text, nl=False)
        else:
            out.write_text(text, encoding="utf-8")
            click.echo(f"wrote {out} ({sum(result.counts.values())} trees)", err=True)
        return
    folder = out or Path(".")
    if as_zip:
        target = folder if folder.suffix == ".zip" else folder / f"{slug(corpus.name)}-gold.zip"
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(result.zip_bytes())
        click.echo(
            f"wrote {target}: " + ", ".join(f"{n} ({c} trees)" for n, c in result.counts.items())
        )
        return
    folder.mkdir(parents=True, exist_ok=True)
    for name, text in result.files.items():
        (folder / name).write_text(text, encoding="utf-8")
        click.echo(f"wrote {folder / name} ({result.counts[name]} trees)")


# ---------------------------------------------------------------------------------------------
# search and findings


def _marked(words: list[str], start: int, end: int) -> str:
    return " ".join(words[:start] + ["[" + " ".join(words[start:end]) + "]"] + words[end:])


@main.command("search")
@click.argument("pattern")
@click.option("--corpus", "corpus_name", required=True, help="Corpus to search.")
@click.option(
    "--in",
    "scope",
    type=click.Choice(["gold", "annotations", "sentences"]),
    default="gold",
    show_default=True,
    help="The gold trees, every annotation's newest tree, or the sentences' words.",
)
@click.option("--state", default=None, help="Only sentences in this state (e.g. gold, queued).")
@click.option(
    "--limit",
    type=click.IntRange(1, 200),
    default=20,
    show_default=True,
    help="Show this many matches (the count is always complete).",
)
@click.option(
    "--bracketed",
    is_flag=True,
    help="Print every matching tree as one-line bracketed text instead.",
)
@data_dir_option
def search_command(
    pattern: str,
    corpus_name: str,
    scope: str,
    state: str | None,
    limit: int,
    bracketed: bool,
    data_dir: Path | None,
) -> None:
    """Find sentences by a word string (* for any word) or a bracketed fragment with holes,
    e.g. '(VP ... (PP on (NP ...)))'; the README describes the patterns."""
    from app.services import search as svc

    with open_db(make_settings(data_dir)) as db, friendly_errors():
        corpus = corpus_named(db, corpus_name)
        if bracketed:
            click.echo(
                svc.export_text(db, corpus, None, pattern, scope=scope, state=state), nl=False
            )
            return
        found = svc.search(db, corpus, None, pattern, scope=scope, state=state, per_page=limit)
    for hit in found.hits:
        who = f" ({hit.annotator})" if hit.annotator else ""
        start, end = hit.spans[0]
        click.echo(
            f"{hit.sentence_id:>6}  {hit.document}:{hit.position + 1} [{hit.state}]{who}"
            f"  {_marked(hit.words, start, end)}"
        )
    shown = f"; {len(found.hits)} shown" if found.total > len(found.hits) else ""
    click.echo(f"{plural(found.total, 'match', 'matches')}{shown}", err=True)


@main.group()
def reference() -> None:
    """Reference trees a corpus's grammars train on beside its gold (never its sentences)."""


@reference.command("add")
@click.argument("file", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--corpus", "corpus_name", required=True, help="Corpus that trains on the trees.")
@click.option("--name", required=True, help="A name for the set, e.g. 'open web treebank'.")
@click.option("--source", default="", help="Where the trees come from (a citation, a URL).")
@click.option(
    "--licence-file",
    type=click.Path(exists=True, dir_okay=False, path_type=Path),
    required=True,
    help="A text file with the trees' licence (shown on Grammars).",
)
@data_dir_option
def reference_add(
    file: Path, corpus_name: str, name: str, source: str, licence_file: Path, data_dir: Path | None
) -> None:
    """Add a bracketed file as a reference set of a corpus (stored whole or not at all)."""
    from app.services import reference as svc

    licence = licence_file.read_text(encoding="utf-8", errors="replace")
    with open_db(make_settings(data_dir)) as db, friendly_errors():
        corpus = corpus_named(db, corpus_name)
        added = svc.add_reference(
            db,
            corpus.id,
            file.read_bytes(),
            name=name,
            source=source,
            licence=licence,
            filename=file.name,
        )
    click.echo(
        f"reference set {added.name!r} of corpus {corpus_name!r}: "
        f"{plural(added.trees, 'tree')}, {plural(added.words, 'word')}; "
        "the next grammar version trains on it"
    )


@reference.command("list")
@click.option("--corpus", "corpus_name", required=True, help="Corpus whose sets to list.")
@data_dir_option
def reference_list(corpus_name: str, data_dir: Path | None) -> None:
    """The corpus's reference sets with their size, source and whether training uses them."""
    from app.services import reference as svc

    with open_db(make_settings(data_dir)) as db, friendly_errors():
        sets = svc.reference_sets(db, corpus_named(db, corpus_name).id)
    if not sets:
        click.echo("no reference sets")
    for r in sets:
        click.echo(
            f"{r.id:>4}  {r.name}  ({plural(r.trees, 'tree')}; "
            f"{'in use' if r.in_use else 'not used'})  {r.source}"
        )


@main.command("members")
@click.option("--corpus", "corpus_name", required=True, help="Corpus whose members to show.")
@click.option("--add", "add", multiple=True, metavar="USER", help="Add USER to the list.")
@click.option("--remove", "remove", multiple=True, metavar="USER", help="Take USER off the list.")
@data_dir_option
def members_command(
    corpus_name: str, add: tuple[str, ...], remove: tuple[str, ...], data_dir: Path | None
) -> None:
    """Show a corpus's members (its list, and those with work of it assigned); --add and
    --remove change the list. Annotators read a corpus they are a member of."""
    from app.services import visibility as svc

    with open_db(make_settings(data_dir)) as db, friendly_errors():
        corpus = corpus_named(db, corpus_name)
        for name in add:
            added = svc.add_member(db, corpus, name)
            click.echo(f"{name}: {'added' if added else 'already on the list'}")
        for name in remove:
            left = svc.remove_member(db, corpus, name)
            still = f" (still reads it: {plural(left, 'sentence')} assigned)" if left else ""
            click.echo(f"{name}: taken off the list{still}")
        rows = svc.members(db, corpus)
    if not rows:
        click.echo("no members")
    for m in rows:
        how = "on the list" if m.explicit else "by assignment"
        click.echo(f"{m.username}  {m.role}  {how}  {plural(m.assigned, 'sentence')} assigned")


@main.command("findings")
@click.option("--corpus", "corpus_name", required=True, help="Corpus whose findings to show.")
@click.option(
    "--run",
    "run_first",
    is_flag=True,
    help="Run the finder now (in this process) before showing its findings.",
)
@click.option(
    "--with-annotations",
    is_flag=True,
    help="With --run: also read submitted annotations of sentences not yet gold.",
)
@click.option(
    "--state",
    type=click.Choice(["open", "fine_as_is", "reopened"]),
    default="open",
    show_default=True,
    help="Which findings to show.",
)
@click.option(
    "--kind",
    type=click.Choice(["bracket", "tag", "rule"]),
    default=None,
    help="Only findings of this kind.",
)
@click.option(
    "--limit",
    type=click.IntRange(1, 200),
    default=20,
    show_default=True,
    help="Show the most suspicious N.",
)
@data_dir_option
def findings_command(
    corpus_name: str,
    run_first: bool,
    with_annotations: bool,
    state: str,
    kind: str | None,
    limit: int,
    data_dir: Path | None,
) -> None:
    """Print the inconsistencies the finder found in a corpus, most suspicious first, each with
    its occurrences (sentence id, marked words, analysis, who settled it)."""
    from app.services import findings as svc

    with open_db(make_settings(data_dir)) as db, friendly_errors():
        corpus = corpus_named(db, corpus_name)
        if run_first:
            run = svc.run_now(
                db, corpus.id, reason="from the command line", with_annotations=with_annotations
            )
            click.echo(
                f"run {run.id}: {run.status}, {run.message} ({run.seconds or 0:.1f} s)", err=True
            )
        page = svc.finding_page(db, corpus.id, state=state, kind=kind, per_page=limit)
        words = svc.sentence_words(
            db, [o["sentence"] for e in page.entries for o in e.row.occurrences]
        )
    if page.run is None:
        raise click.ClickException(f"the finder has not run on {corpus_name!r} yet; add --run")
    for entry in page.entries:
        f = entry.row
        click.echo(f"#{f.rank}  [{f.kind}]  {f.summary}  (score {f.score:.2f})")
        for o in f.occurrences:
            analysis = o["analysis"] or "(no constituent)"
            click.echo(
                f"    {o['sentence']:>6}  {analysis:<14} {o['by']:<12} "
                f"{_marked(words.get(o['sentence'], []), o['start'], o['end'])}"
            )
    click.echo(
        f"{plural(page.total, state.replace('_', ' ') + ' finding')}"
        f"{f'; {len(page.entries)} shown' if page.total > len(page.entries) else ''}",
        err=True,
    )


# ---------------------------------------------------------------------------------------------
# corpora and assignment


@main.group()
def corpus() -> None:
    """List corpora or remove one."""


@corpus.command("list")
@data_dir_option
def corpus_list(data_dir: Path | None) -> None:
    """Corpora with their sentence counts per state and gold count."""
    from app.services.corpora import corpus_overview

    with open_db(make_settings(data_dir)) as db:
        rows = corpus_overview(db)
    if not rows:
        click.echo("no corpora yet")
    for row in rows:
        states = ", ".join(f"{state} {n}" for state, n in row.states.items())
        click.echo(
            f"{row.corpus.id:>4}  {row.corpus.name}  ({row.sentences} sentences: "
            f"{states}; gold trees {row.gold})"
        )


@corpus.command("remove")
@click.argument("name")
@click.option(
    "--confirm",
    "typed",
    prompt="Type the corpus name to confirm its removal",
    help="The corpus name again, to confirm.",
)
@data_dir_option
def corpus_remove(name: str, typed: str, data_dir: Path | None) -> None:
    """Remove a corpus and everything in it (asks for its name as confirmation)."""
    from app.services.corpora import delete_corpus

    with open_db(make_settings(data_dir)) as db, friendly_errors():
        target = corpus_named(db, name)
        removed = delete_corpus(db, target.id, typed)
    click.echo(f"removed corpus {removed!r}")


@main.command()
@click.option("--corpus", "corpus_name", required=True, help="Corpus whose sentences to assign.")
@click.option(
    "--per-sentence",
    type=click.IntRange(1, 10),
    default=None,
    help="Annotators per sentence [default: the corpus setting].",
)
@click.option(
    "--user",
    "usernames",
    multiple=True,
    help="Assign only to these users (repeatable) [default: every active "
    "annotator and adjudicator].",
)
@data_dir_option
def assign(
    corpus_name: str, per_sentence: int | None, usernames: tuple[str, ...], data_dir: Path | None
) -> None:
    """Give every open sentence its annotators, balanced across the team."""
    from app.services.assignment import assign_sentences

    with open_db(make_settings(data_dir)) as db, friendly_errors():
        target = corpus_named(db, corpus_name)
        result = assign_sentences(
            db, target.id, per_sentence=per_sentence, usernames=list(usernames) or None
        )
    click.echo(result.summary())
    for username, n in sorted(result.per_user.items()):
        click.echo(f"  {username}: {n}")


# ---------------------------------------------------------------------------------------------
# users


@main.group()
def user() -> None:
    """Manage accounts: add, list, set-role, disable, enable, set-password."""


def _password(value: str | None, generate: bool) -> tuple[str, bool]:
    import secrets

    if generate:
        return secrets.token_urlsafe(12), True
    if value:
        return value, False
    return click.prompt("Password", hide_input=True, confirmation_prompt=True), False


@user.command("add")
@click.argument("username")
@click.option("--role", type=click.Choice(ROLES), default="annotator", show_default=True)
@click.option("--display-name", default="", help="Name shown on the pages.")
@click.option(
    "--password",
    default=None,
    help="The password (prefer the prompt: a command line can be seen by others).",
)
@click.option("--generate", is_flag=True, help="Make up a password and print it.")
@data_dir_option
def user_add(
    username: str,
    role: str,
    display_name: str,
    password: str | None,
    generate: bool,
    data_dir: Path | None,
) -> None:
    """Create an account."""
    from app.services.users import create_user

    secret, made_up = _password(password, generate)
    with open_db(make_settings(data_dir)) as db, friendly_errors():
        create_user(db, username, secret, role, display_name=display_name)
    click.echo(f"created {username} ({role})" + (f", password: {secret}" if made_up else ""))


@user.command("list")
@data_dir_option
def user_list(data_dir: Path | None) -> None:
    """Every account with its role and whether it is active."""
    from app.services.users import list_users

    with open_db(make_settings(data_dir)) as db:
        for u in list_users(db):
            state = "active" if u.active else "disabled"
            click.echo(f"{u.username:<20} {u.role:<12} {state:<9} {u.display_name}")


@user.command("set-role")
@click.argument("username")
@click.argument("role", type=click.Choice(ROLES))
@data_dir_option
def user_set_role(username: str, role: str, data_dir: Path | None) -> None:
    """Change an account's role."""
    from app.services.users import set_role, user_by_name

    with open_db(make_settings(data_dir)) as db, friendly_errors():
        set_role(db, user_by_name(db, username), role)
    click.echo(f"{username} is now {role}")


def _set_active(username: str, active: bool, data_dir: Path | None) -> None:
    from app.services.users import set_active, user_by_name

    with open_db(make_settings(data_dir)) as db, friendly_errors():
        set_active(db, user_by_name(db, username), active)
    click.echo(f"{username} is {'enabled' if active else 'disabled'}")


@user.command("disable")
@click.argument("username")
@data_dir_option
def user_disable(username: str, data_dir: Path | None) -> None:
    """Disable an account and end its sessions (its work stays)."""
    _set_active(username, False, data_dir)


@user.command("enable")
@click.argument("username")
@data_dir_option
def user_enable(username: str, data_dir: Path | None) -> None:
    """Enable a disabled account again."""
    _set_active(username, True, data_dir)


@user.command("set-password")
@click.argument("username")
@click.option("--password", default=None, help="The new password (default: prompt).")
@click.option("--generate", is_flag=True, help="Make up a password and print it.")
@data_dir_option
def user_set_password(
    username: str, password: str | None, generate: bool, data_dir: Path | None
) -> None:
    """Set a new password; the account's sessions end."""
    from app.services.users import set_password, user_by_name

    secret, made_up = _password(password, generate)
    with open_db(make_settings(data_dir)) as db, friendly_errors():
        set_password(db, user_by_name(db, username), secret)
    click.echo(f"password of {username} changed" + (f": {secret}" if made_up else ""))


# ---------------------------------------------------------------------------------------------
# backup


@main.command()
@click.option(
    "--out",
    type=click.Path(dir_okay=False, path_type=Path),
    default=None,
    help="Backup file [default: DATA_DIR/backups/treewright-<time>.db].",
)
@data_dir_option
def backup(out: Path | None, data_dir: Path | None) -> None:
    """Write a consistent copy of the live SQLite database (safe while serving)."""
    from app.services.backup import backup_sqlite

    settings = make_settings(data_dir)
    with friendly_errors():
        info = backup_sqlite(settings, out)
    click.echo(f"backup written: {info.path} ({info.bytes} bytes, integrity ok)")


@main.command()
@click.argument("source", type=click.Path(exists=True, dir_okay=False, path_type=Path))
@click.option("--yes", is_flag=True, help="Do not ask for confirmation.")
@data_dir_option
def restore(source: Path, yes: bool, data_dir: Path | None) -> None:
    """Replace the database with a backup (the current one is kept in DATA_DIR/backups).

    Stop the service first.
    """
    from app.services.backup import restore_sqlite

    settings = make_settings(data_dir)
    if not yes:
        click.confirm(f"Replace the database in {settings.data_dir} with {source}?", abort=True)
    with friendly_errors():
        safety, live = restore_sqlite(settings, source)
    if safety:
        click.echo(f"the previous database was kept as {safety.path}")
    click.echo(f"restored {source} into {live}")
