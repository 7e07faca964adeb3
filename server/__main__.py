"""The `railsign` command line: serve, demo, migrate, export, import, user, token, analyze, sequence, check,
fit-zth, bom-import, worker,
jobs.

Exit codes: 0 success; 1 the analysis found a failing check (`check --strict`: or an unaccepted
marginal one); 2 bad arguments or input; 3 the database cannot be reached.
"""

from __future__ import annotations

import argparse
import json
import logging
import signal
import sys
import threading
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import uvicorn
from pydantic import ValidationError
from sqlalchemy import func, select
from sqlalchemy.engine import make_url
from sqlalchemy.exc import OperationalError

import railsign
from railsign import gate
from server import backup, migrate, transfer
from server.analysis import DocumentError, analyze_rail, format_report
from server.analysis.sequence import analyze_sequence, format_sequence_report, timeline_csv
from server.analysis.units import quantity
from server.analysis.zth_fit import BOARD_TAU_WORDS, METHOD
from server.app import create_app
from server.config import Settings
from server.db import make_engine, make_sessionmaker, ping
from server.demo import DEMO_PASSWORD, DEMO_USERS, seed_if_empty
from server.models import Job
from server.schemas.rail import normalize
from server.schemas.validation import DocumentInvalid, parse_rail_document
from server.services import jobs, risks, sequences, teams, users
from server.services.access import Actor
from server.services.bom_import import parse_bom
from server.services.errors import ServiceError
from server.services.parts import fit_zth_points, zth_points_from_text
from server.services.results import engine_version
from server.units import UnitError, parse_quantity
from server.worker import WorkerPool

EXIT_OK, EXIT_FAILING_CHECK, EXIT_BAD_INPUT, EXIT_NO_DATABASE = 0, 1, 2, 3


class CliError(Exception):
    def __init__(self, message: str, code: int = EXIT_BAD_INPUT) -> None:
        super().__init__(message)
        self.code = code


def _settings(**overrides: Any):
    try:
        return Settings(**{k: v for k, v in overrides.items() if v is not None})
    except ValidationError as exc:
        raise CliError("bad setting: " + "; ".join(f"{'.'.join(map(str, e['loc']))}: {e['msg']}"
                                                   for e in exc.errors())) from None


def _safe_url(url: str) -> str:
    return make_url(url).render_as_string(hide_password=True)


def _migrate(settings) -> None:
    try:
        migrate.upgrade(settings)
    except OperationalError as exc:
        raise CliError(f"cannot reach the database at {_safe_url(settings.database_url)}: "
                       f"{str(exc.orig).strip().splitlines()[0]}", EXIT_NO_DATABASE) from None


def _sessions(settings):
    return make_sessionmaker(make_engine(settings))


def _actor(session, username: str | None):
    if username is None:
        return Actor.system("railsign-cli")
    return Actor.for_user(users.get_user_by_name(session=session, username=username))


def _read_json(path: str) -> Any:
    if path == "-":
        text = sys.stdin.read()
    else:
        file = Path(path)
        if not file.is_file():
            raise CliError(f"no such file: {path}")
        text = file.read_text(encoding="utf-8")
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise CliError(f"{path} is not valid JSON: {exc}") from None


def _write_json(data: Any, output: str | None) -> None:
    text = json.dumps(data, indent=2, sort_keys=False, ensure_ascii=False) + "\n"
    if output in (None, "-"):
        sys.stdout.write(text)
    else:
        Path(output).write_text(text, encoding="utf-8")
        print(f"wrote {output}", file=sys.stderr)


def _serve(settings, *, seed_demo: bool) -> int:
    _migrate(settings)
    if seed_demo:
        factory = _sessions(settings)
        with factory() as session:
            seeded = seed_if_empty(session)
        url = f"http://{settings.host}:{settings.port}/"
        print(f"railsign demo on {url}  (API docs: {url}docs)")
        print(("Seeded the demo data. " if seeded else "The database has data already; not seeded again. ")
              + f"Log in as any of the demo users with the password '{DEMO_PASSWORD}':")
        for name, role, _ in DEMO_USERS:
            print(f"  {name:<8} {role}")
        sys.stdout.flush()
    try:
        settings.check_secret()
    except ValueError as exc:
        raise CliError(str(exc)) from None
    log_level = settings.log_level.lower()
    if settings.web_workers > 1:
        uvicorn.run("server.app:create_app", factory=True, host=settings.host, port=settings.port,
                    workers=settings.web_workers, log_level=log_level)
    else:
        uvicorn.run(create_app(settings), host=settings.host, port=settings.port, log_level=log_level)
    return EXIT_OK


def cmd_serve(args: argparse.Namespace) -> int:
    return _serve(_settings(host=args.host, port=args.port, web_workers=args.workers), seed_demo=False)


def cmd_demo(args: argparse.Namespace) -> int:
    return _serve(_settings(host=args.host, port=args.port, demo=True), seed_demo=True)


def cmd_migrate(args: argparse.Namespace) -> int:
    settings = _settings()
    if args.downgrade:
        migrate.downgrade(settings, args.downgrade)
        print(f"downgraded {_safe_url(settings.database_url)} to {args.downgrade}")
    else:
        _migrate(settings)
        print(f"{_safe_url(settings.database_url)} is at the newest schema ({migrate.head_revision(settings)})")
    return EXIT_OK


def cmd_export(args: argparse.Namespace) -> int:
    settings = _settings()
    _migrate(settings)
    with _sessions(settings)() as session:
        actor = _actor(session, args.user)
        if args.rail is not None:
            data = transfer.export_rail(session=session, actor=actor, rail_id=args.rail)
        elif args.board is not None:
            data = transfer.export_board(session=session, actor=actor, board_id=args.board)
        else:
            data = transfer.export_product(session=session, actor=actor, product_id=args.product)
    _write_json(data, args.output)
    return EXIT_OK


def cmd_import(args: argparse.Namespace) -> int:
    data = _read_json(args.file)
    settings = _settings()
    _migrate(settings)
    with _sessions(settings)() as session:
        report = transfer.import_data(session=session, actor=_actor(session, args.user), data=data,
                                      board_id=args.board, team=args.team, message=args.message,
                                      require_parts=args.require_parts)
    print("\n".join(report.lines()))
    return EXIT_OK


def cmd_user(args: argparse.Namespace) -> int:
    settings = _settings()
    _migrate(settings)
    with _sessions(settings)() as session:
        actor = _actor(session, None)
        if args.user_command == "add":
            password = _password_from_stdin() if args.password_stdin else None
            user = users.create_user(session=session, actor=actor, username=args.name, role=args.role,
                                     password=password, teams=args.team or [])
            print(f"added {user.username} ({user.role}; teams: {', '.join(sorted(t.name for t in user.teams)) or '-'})")
        elif args.user_command == "list":
            for u in users.list_users(session=session, actor=actor):
                d = users.user_dict(u)
                print(f"{d['username']:<16} {d['role']:<9} {'active' if d['active'] else 'disabled':<8} "
                      f"{', '.join(d['teams'])}")
        elif args.user_command == "set-role":
            user = users.get_user_by_name(session=session, username=args.name)
            users.update_user(session=session, actor=actor, user_id=user.id, role=args.role)
            print(f"{user.username} is now {user.role}")
        elif args.user_command == "add-team":
            user = users.get_user_by_name(session=session, username=args.name)
            teams.join_team(session=session, actor=actor, user_id=user.id, team_name=args.team)
            print(f"{user.username} is in {', '.join(sorted(t.name for t in user.teams))}")
        elif args.user_command == "set-password":
            user = users.get_user_by_name(session=session, username=args.name)
            users.update_user(session=session, actor=actor, user_id=user.id, password=_password_from_stdin())
            print(f"new password set for {user.username}; their sessions have ended")
        elif args.user_command in ("disable", "enable"):
            user = users.get_user_by_name(session=session, username=args.name)
            users.update_user(session=session, actor=actor, user_id=user.id, active=args.user_command == "enable")
            print(f"{user.username} is {'disabled' if not user.active else 'active'}")
    return EXIT_OK


def _password_from_stdin() -> str:
    password = sys.stdin.readline().rstrip("\r\n")
    if not password:
        raise CliError("no password on standard input")
    return password


def cmd_token(args: argparse.Namespace) -> int:
    settings = _settings()
    _migrate(settings)
    with _sessions(settings)() as session:
        actor = _actor(session, None)
        if args.token_command == "create":
            token, clear = users.create_token(session=session, actor=actor, username=args.user, name=args.label)
            print(clear)
            print(f"token {token.id} '{token.name}' for {args.user}: shown once, store it now", file=sys.stderr)
        elif args.token_command == "revoke":
            token = users.revoke_token(session=session, actor=actor, token_id=args.id)
            print(f"token {token.id} '{token.name}' revoked")
        elif args.token_command == "list":
            for t in users.list_tokens(session=session, actor=actor, username=args.user):
                state = "revoked" if t.revoked_at else "active"
                print(f"{t.id:>5} {t.name:<20} {state:<8} created {t.created_at:%Y-%m-%d %H:%M}")
    return EXIT_OK


def _distribution_arg(text: str) -> str | dict[str, str]:
    """``uniform``, ``normal`` or ``PARAM=KIND,...`` (e.g. ``c=normal,i_limit=normal``)."""
    if "=" not in text:
        return text
    out = {}
    for part in text.split(","):
        key, _, kind = part.partition("=")
        out[key.strip()] = kind.strip()
    return out


def cmd_analyze(args: argparse.Namespace) -> int:
    """Analyse a rail file without any database (through the public `railsign` module): report or JSON,
    exit 1 when a check fails."""
    try:
        document = railsign.parse_document(_read_json(args.file))
    except railsign.DocumentInvalid as exc:
        lines = "\n".join(f"  {e.text}" for e in exc.errors)
        raise CliError(f"{args.file} is not a valid {exc.what}:\n{lines}") from None
    progress = None
    if args.monte_carlo and not args.json and sys.stderr.isatty():
        def progress(fraction: float) -> None:
            print(f"\rMonte Carlo {fraction:6.1%}", end="", file=sys.stderr, flush=True)
    try:
        result = railsign.analyze(document, corners=not args.nominal, monte_carlo=args.monte_carlo, seed=args.seed,
                                  distribution=_distribution_arg(args.distribution), waveforms=args.waveforms,
                                  progress=progress)
    except ValueError as exc:
        raise CliError(f"{args.file}: {exc}") from None
    if progress:
        print(file=sys.stderr)
    data = result.model_dump(mode="json", by_alias=True, exclude_unset=True)
    if args.json:
        if not args.waveforms:
            data["startup"].pop("waveforms", None)
        print(json.dumps(data, indent=2, allow_nan=False))
    else:
        print(format_report(data, document))
    failing = any(c.verdict == "fail" for c in result.checks)
    return EXIT_FAILING_CHECK if failing else EXIT_OK


def _si_rail(data: Any, where: str) -> Any:
    """A rail document in SI numbers (engineering notation such as "680uF" read as the web form reads it)."""
    try:
        return normalize(parse_rail_document(data))
    except DocumentInvalid as exc:
        lines = "\n".join(f"  {e.text}" for e in exc.errors)
        raise CliError(f"{where} is not a valid {exc.what}:\n{lines}") from None


def _sequence_rails(doc: Any, base: Path) -> tuple[Any, dict[str, Any]]:
    """The sequence with its inline rails in SI numbers, and the rail documents it names by ``ref`` (paths
    relative to the sequence file), read and put in SI numbers."""
    refs: dict[str, Any] = {}
    rails = doc.get("rails") if isinstance(doc, dict) else None
    if not isinstance(rails, list):
        return doc, refs
    items = []
    for k, item in enumerate(rails):
        if isinstance(item, dict) and isinstance(item.get("rail"), dict):
            item = {**item, "rail": _si_rail(item["rail"], f"rails[{k}].rail")}
        ref = item.get("ref") if isinstance(item, dict) else None
        if isinstance(ref, str) and ref not in refs and (base / ref).is_file():
            refs[ref] = _si_rail(_read_json(str(base / ref)), ref)
        items.append(item)
    return {**doc, "rails": items}, refs


def cmd_sequence(args: argparse.Namespace) -> int:
    """Analyse a board sequence file without any database: the checks and key figures in words, or JSON;
    exit 1 when a check fails."""
    doc = _read_json(args.file)
    base = Path(args.file).parent if args.file != "-" else Path.cwd()
    doc, refs = _sequence_rails(doc, base)
    try:
        result = analyze_sequence(doc, refs)
    except DocumentError as exc:
        lines = "\n".join(f"  {e.text}" for e in exc.errors)
        raise CliError(f"{args.file} is not a valid board sequence:\n{lines}") from None
    if args.json:
        print(json.dumps(result, indent=2, allow_nan=False))
    elif args.csv:
        sys.stdout.write(timeline_csv(result))
    else:
        print(format_sequence_report(result))
    failing = any(c["verdict"] == "fail" for c in result["checks"])
    return EXIT_FAILING_CHECK if failing else EXIT_OK


def cmd_check(args: argparse.Namespace) -> int:
    """The CI gate: analyse every rail file under the paths, one line per rail, a summary, JUnit and baseline."""

    accepted: set = set()
    if args.baseline:
        try:
            accepted = gate.load_baseline(args.baseline)
        except gate.BaselineInvalid as exc:
            raise CliError(str(exc)) from None

    def print_line(run, rail) -> None:
        if not args.quiet or rail.invalid or rail.result.verdict != "pass":
            print(run.line(rail), flush=True)

    run = gate.run_check(args.paths, strict=args.strict, accepted=accepted, on_rail=print_line)
    if args.write_baseline:
        baseline = gate.baseline_dict(run)
        gate.write_json(args.write_baseline, baseline)
        run.accepted |= {(item["sha256"], item["check"]) for item in baseline["accepted"]}
        print(f"wrote {args.write_baseline}: {len(baseline['accepted'])} marginal checks accepted "
              "(failing checks are never accepted)")
    if args.junit:
        Path(args.junit).write_text(gate.junit_xml(run), encoding="utf-8")
        print(f"wrote {args.junit}")
    print("\n".join(run.summary()))
    return run.exit_code()


def _fit_report(fit, file: str) -> str:
    """The fit in words: the stages, the largest error, the board stage and the part document's fields."""
    lines = [f"Foster stages fitted to {len(fit.points)} Zth points of {file} (junction to case), "
             f"{len(fit.stages)} stages:", "  stage  r             tau"]
    lines += [f"  {k:<5}  {quantity(r, 'K/W', 4):<12}  {quantity(tau, 's', 4)}"
              for k, (r, tau) in enumerate(fit.stages, start=1)]
    lines.append(f"Fitted total (junction to case): {quantity(fit.fitted_total, 'K/W', 4)}")
    lines.append(f"Largest error over the points: {fit.largest_error:.2%} "
                 f"(at {quantity(fit.largest_error_at, 's')})")
    r_b, tau_b = fit.board
    lines.append(f"Board stage (mounting): r {quantity(r_b, 'K/W', 4)} = R_th junction-ambient "
                 f"{quantity(fit.rth_ja, 'K/W', 4)} minus the fitted total; tau {quantity(tau_b, 's', 4)}"
                 + (f" ({BOARD_TAU_WORDS})" if fit.board_tau_default else " (as given)"))
    lines.append(f"Method: {METHOD}.")
    lines.append("fet.zth (every stage, the board stage last):")
    lines.append(json.dumps([{"r": r, "tau": tau} for r, tau in fit.all_stages]))
    lines.append("fet.zth_points:")
    lines.append(json.dumps([list(p) for p in fit.points]))
    return "\n".join(lines)


def cmd_fit_zth(args: argparse.Namespace) -> int:
    """Fit Foster stages to a Zth curve file (no database needed): print the stages, the largest error and the
    board stage, or JSON."""
    file = Path(args.file)
    if args.file != "-" and not file.is_file():
        raise CliError(f"no such file: {args.file}")
    text = sys.stdin.read() if args.file == "-" else file.read_text(encoding="utf-8")
    try:
        rth_ja = parse_quantity(args.rth_ja, "K/W")
        board_tau = None if args.board_tau is None else parse_quantity(args.board_tau, "s")
    except UnitError as exc:
        raise CliError(f"--rth-ja / --board-tau: {exc}") from None
    fit = fit_zth_points(zth_points_from_text(text, field=args.file), args.stages, rth_ja, board_tau)
    if args.json:
        print(json.dumps(fit.as_dict(), indent=2, allow_nan=False))
    else:
        print(_fit_report(fit, args.file))
    return EXIT_OK


def cmd_bom_import(args: argparse.Namespace) -> int:
    """A BOM's capacitor lines as the rail document's ``load.bank`` (JSON on standard output, warnings on
    standard error; no database needed)."""
    file = Path(args.file)
    if args.file != "-" and not file.is_file():
        raise CliError(f"no such file: {args.file}")
    try:
        text = sys.stdin.read() if args.file == "-" else file.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise CliError(f"{args.file}: not UTF-8 text (save the BOM as CSV, UTF-8)") from None
    found = parse_bom(text)
    for warning in found.warnings:
        print(f"railsign: warning: {warning}", file=sys.stderr)
    if found.errors:
        raise CliError(f"{args.file}: the BOM has lines that cannot be read; nothing printed\n"
                       + "\n".join(f"  {e}" for e in found.errors))
    print(json.dumps(found.groups, indent=2, ensure_ascii=False, allow_nan=False))
    return EXIT_OK


def cmd_worker(args: argparse.Namespace) -> int:
    settings = _settings()
    if args.check:
        problem = ping(make_engine(settings))
        if problem:
            raise CliError(f"cannot reach the database at {_safe_url(settings.database_url)}: {problem}",
                           EXIT_NO_DATABASE)
        print("database reachable")
        return EXIT_OK
    _migrate(settings)
    pool = WorkerPool(_sessions(settings), settings, threads=args.concurrency, poll_s=args.poll)
    stop = threading.Event()

    def _stop(signum, _frame) -> None:  # noqa: ANN001
        logging.getLogger("railsign.worker").info("signal %s: finishing running jobs, then stopping", signum)
        stop.set()

    signal.signal(signal.SIGTERM, _stop)
    signal.signal(signal.SIGINT, _stop)
    pool.start()
    print(f"worker {pool.name}: {args.concurrency} threads on {_safe_url(settings.database_url)}", flush=True)
    if args.exit_when_empty:
        factory = _sessions(settings)
        while not stop.wait(args.poll):
            with factory() as session:
                left = session.scalar(select(func.count()).select_from(Job).where(Job.state.in_(["queued",
                                                                                                 "running"])))
            if not left:
                break
    else:
        stop.wait()
    pool.stop()
    print(f"worker {pool.name}: stopped after {pool.jobs_done} jobs", flush=True)
    return EXIT_OK


def cmd_jobs(args: argparse.Namespace) -> int:
    settings = _settings()
    _migrate(settings)
    with _sessions(settings)() as session:
        actor = _actor(session, None)
        if args.jobs_command == "retry":
            if args.failed:
                rows, _ = jobs.list_jobs(session=session, actor=actor, state="failed", limit=100_000)
                ids = [j.id for j in rows if j.kind != "board"]
            elif args.id is not None:
                ids = [args.id]
            else:
                raise CliError("say which job to retry: an ID, or --failed for all failed jobs")
            for job_id in ids:
                jobs.retry_job(session=session, actor=actor, job_id=job_id)
            print(f"queued again: {len(ids)} job(s)")
            return EXIT_OK
        if args.jobs_command == "rerun-outdated":
            queued = jobs.enqueue_outdated(session=session)
            print(f"queued {len(queued)} analyses at engine {engine_version()} of head revisions whose results "
                  "are all of another engine version")
            boards = sequences.enqueue_outdated(session=session)
            print(f"queued {len(boards)} power-up sequence analyses without a result of their current inputs")
            return EXIT_OK
        rows, total = jobs.list_jobs(session=session, actor=actor, state=args.state, limit=args.limit)
        print(f"{'id':>6} {'kind':<12} {'state':<10} {'progress':>8} {'rail':>6} {'rev':>4} {'tries':>5}  error")
        for j in rows:
            print(f"{j.id:>6} {j.kind:<12} {j.state:<10} {j.progress:>8.0%} {j.rail_id or '-':>6} "
                  f"{j.revision_n or '-':>4} {j.attempts:>5}  {(j.error or '')[:60]}")
        print(f"{len(rows)} of {total} jobs")
    return EXIT_OK


def cmd_backup(args: argparse.Namespace) -> int:
    settings = _settings()
    _migrate(settings)
    try:
        backup.backup(settings, Path(args.file))
    except backup.BackupError as exc:
        raise CliError(str(exc)) from None
    print(f"backed up {_safe_url(settings.database_url)} to {args.file}")
    return EXIT_OK


def cmd_restore(args: argparse.Namespace) -> int:
    settings = _settings()
    try:
        backup.restore(settings, Path(args.file))
    except backup.BackupError as exc:
        raise CliError(str(exc)) from None
    _migrate(settings)  # a backup of an older schema is brought up to this version's
    print(f"restored {args.file} into {_safe_url(settings.database_url)} (schema {migrate.head_revision(settings)})")
    return EXIT_OK


def cmd_risks(args: argparse.Namespace) -> int:
    settings = _settings()
    _migrate(settings)
    with _sessions(settings)() as session:
        taken = risks.snapshot_all(session=session, actor=_actor(session, None))
    print(f"risk snapshot of today taken for {taken} product(s)")
    return EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="railsign", description="Design sign-off for switched power rails.")
    parser.add_argument("--log-level", default=None, help="DEBUG, INFO, WARNING or ERROR")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def command(name: str, func: Callable[[argparse.Namespace], int], help_text: str) -> argparse.ArgumentParser:
        p = sub.add_parser(name, help=help_text, description=help_text)
        p.set_defaults(func=func)
        return p

    p = command("serve", cmd_serve, "migrate the database, then serve the web app and API")
    p.add_argument("--host", help="listen address (default: RAILSIGN_HOST or 127.0.0.1)")
    p.add_argument("--port", type=int, help="port (default: RAILSIGN_PORT or 8000)")
    p.add_argument("--workers", type=int, help="web processes (default: RAILSIGN_WEB_WORKERS or 1)")
    p = command("demo", cmd_demo, "serve with demo data (seeded when the database is empty)")
    p.add_argument("--host")
    p.add_argument("--port", type=int)
    p = command("migrate", cmd_migrate, "upgrade the database schema to the newest revision")
    p.add_argument("--downgrade", metavar="REV", help="downgrade to REV instead ('base' empties the schema)")

    p = command("export", cmd_export, "write rails as a JSON bundle: each rail's current document, the library part "
                "it uses (name and revision) and the revision it comes from (number and sha256)")
    which = p.add_mutually_exclusive_group(required=True)
    which.add_argument("--rail", type=int, help="one rail, with its product and board")
    which.add_argument("--board", type=int, help="one board's rails")
    which.add_argument("--product", type=int, help="all boards of a product")
    p.add_argument("-o", "--output", help="file to write (default: standard output)")
    p.add_argument("--user", help="act as this user (default: the command line, all teams)")
    p = command("import", cmd_import, "store rails from a JSON file (a bundle, or one rail document with --board): "
                "an unchanged rail gets no new revision, library parts are linked again by name and revision")
    p.add_argument("file", help="JSON file, or - for standard input")
    p.add_argument("--board", type=int, help="board for a file that holds one rail (a rail document or a one-rail "
                   "bundle)")
    p.add_argument("--require-parts", action="store_true",
                   help="store nothing when a library part the file names is missing here or differs (default: such "
                        "a rail keeps the FET of its document, unlinked, and the report says so)")
    p.add_argument("--team", help="team that owns a product the bundle creates")
    p.add_argument("--user", help="author of the new revisions (default: railsign-cli)")
    p.add_argument("--message", default="imported", help="revision message")

    p = command("backup", cmd_backup, "write the whole database (rails, revisions, results, approvals, waivers, "
                "audit trail) to one file: SQLite's online backup, or pg_dump's custom format for PostgreSQL")
    p.add_argument("file", help="backup file to write (replaced if it exists)")
    p = command("restore", cmd_restore, "replace the database's contents with a backup file's (stop the service "
                "and its workers first)")
    p.add_argument("file", help="backup file written by railsign backup")

    p = command("analyze", cmd_analyze, "analyse a rail document file (no database needed)")
    p.add_argument("file", help="rail document (JSON), or - for standard input")
    p.add_argument("--json", action="store_true", help="print one JSON object (SI units) instead of the report")
    p.add_argument("--nominal", action="store_true",
                   help="the nominal point only: a quick look, not a sign-off verdict (default: the worst case over "
                        "the tolerance corners and a search inside the tolerance box, as the pages show)")
    p.add_argument("--corners", action="store_true", help=argparse.SUPPRESS)  # the default now; kept for old scripts
    p.add_argument("--monte-carlo", type=int, default=0, metavar="N", help="Monte Carlo samples (default 0)")
    p.add_argument("--seed", type=int, default=0, help="random seed of the Monte Carlo run")
    p.add_argument("--distribution", default="uniform",
                   help="Monte Carlo distribution: uniform (within the tolerance) or normal (the tolerance as 3 "
                        "sigma, truncated to it) for every parameter, or per parameter as PARAM=KIND,... with "
                        "PARAM one of v_s, c, i_limit, timer_c, i_charge, v_trip (the others uniform)")
    p.add_argument("--waveforms", action="store_true", help="include the start-up waveforms in --json")

    p = command("sequence", cmd_sequence, "analyse a board power-up sequence file (schema railsign.sequence/1): "
                "every rail on its shared supplies on one time line, at nominal and supply-low (no database needed)")
    p.add_argument("file", help="sequence document (JSON), or - for standard input; rails given by ref are "
                                "rail files relative to it")
    out = p.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true", help="print one JSON object (SI units) instead of the report")
    out.add_argument("--csv", action="store_true", help="print the time lines as CSV (a row per instant and corner: "
                                                        "supplies' voltage and current, rails' current and output)")

    p = command("check", cmd_check,
                "CI gate: analyse every rail file (*.json, recursively; a bundle counts each rail) on the sign-off "
                "basis; exit 2 when a document is invalid, else 1 when a check fails (or, with --strict, a marginal "
                "check is not in the baseline), else 0")
    p.add_argument("paths", nargs="+", metavar="PATH", help="rail files and folders")
    p.add_argument("--strict", action="store_true", help="marginal checks fail the run unless the baseline accepts "
                   "them")
    p.add_argument("--junit", metavar="FILE", help="write a JUnit XML report: a test suite per rail, a test case per "
                   "check")
    p.add_argument("--baseline", metavar="FILE", help="accepted marginal checks (by document sha256 and check id)")
    p.add_argument("--write-baseline", metavar="FILE", help="write a baseline accepting every marginal check of "
                   "this run (never a failing one), and judge the run with it")
    p.add_argument("--quiet", action="store_true", help="print only rails that do not pass, and the summary")

    p = command("fit-zth", cmd_fit_zth,
                "fit Foster stages to a MOSFET's single-pulse transient thermal impedance curve (no database "
                "needed): bounded least squares on log Zth, then the board stage up to R_th junction-ambient")
    p.add_argument("file", metavar="POINTS.csv", help="the curve as 't, Zth' lines (s, K/W; units allowed, a header "
                   "line is skipped), or - for standard input")
    p.add_argument("--stages", type=int, required=True, choices=range(2, 7), metavar="N",
                   help="number of Foster stages to fit, 2 to 6")
    p.add_argument("--rth-ja", required=True, metavar="X",
                   help="R_th junction-ambient as mounted (K/W, e.g. 40 or '40 K/W'): the board stage makes Zth at "
                        "long times equal to it")
    p.add_argument("--board-tau", metavar="S", help="time constant of the board stage (s, e.g. 20 or '20 s'; "
                   "default 10 s, common practice, no source; a shorter one is the cautious choice)")
    p.add_argument("--json", action="store_true", help="print one JSON object (SI units) instead of the report")

    p = command("bom-import", cmd_bom_import,
                "read a BOM's capacitor lines (CSV) into a capacitor bank: prints the rail document's load.bank "
                "as JSON (no database needed)")
    p.add_argument("file", metavar="FILE.csv", help="the capacitors on the rail's net: a header line (reference "
                   "designators, value, dielectric, rating, count; optional tolerance, ESR), one capacitor line per "
                   "line; or - for standard input")

    p = command("worker", cmd_worker, "run analysis jobs from the database queue until stopped")
    p.add_argument("--concurrency", type=int, default=1, help="worker threads in this process (default 1)")
    p.add_argument("--poll", type=float, default=0.5, help="seconds between looks at an empty queue")
    p.add_argument("--exit-when-empty", action="store_true", help="stop once no job is queued or running")
    p.add_argument("--check", action="store_true", help="only check that the database answers (health check)")
    p = command("jobs", cmd_jobs, "list analysis jobs, queue failed ones again, or re-run outdated results")
    jsub = p.add_subparsers(dest="jobs_command")
    p.set_defaults(jobs_command="list", state=None, limit=50)
    j = jsub.add_parser("list", help="list jobs, newest first")
    j.add_argument("--state", choices=["queued", "running", "done", "failed", "cancelled"])
    j.add_argument("--limit", type=int, default=50)
    j = jsub.add_parser("retry", help="queue a failed or cancelled job again")
    j.add_argument("id", type=int, nargs="?")
    j.add_argument("--failed", action="store_true", help="every failed job")
    jsub.add_parser("rerun-outdated", help="queue the analysis, at the current engine, of every rail's head "
                    "revision whose results are all of another engine version (also done as the service starts)")

    p = command("risks", cmd_risks, "risk view: 'snapshot' stores today's risk counts of every product for the "
                "trend chart, replacing one taken earlier today (run it daily, e.g. from a timer)")
    rsub = p.add_subparsers(dest="risks_command", required=True)
    rsub.add_parser("snapshot", help="store today's risk counts of every product (replacing today's earlier one)")

    p = command("user", cmd_user, "manage users")
    usub = p.add_subparsers(dest="user_command", required=True)
    u = usub.add_parser("add", help="add a user")
    u.add_argument("name")
    u.add_argument("--role", required=True, choices=["viewer", "designer", "reviewer", "manager", "admin"])
    u.add_argument("--team", action="append", help="team to join (repeatable; created when new)")
    u.add_argument("--password-stdin", action="store_true", help="read the password from standard input")
    usub.add_parser("list", help="list users")
    u = usub.add_parser("set-role", help="change a user's role")
    u.add_argument("name")
    u.add_argument("--role", required=True, choices=["viewer", "designer", "reviewer", "manager", "admin"])
    u = usub.add_parser("add-team", help="add a user to a team")
    u.add_argument("name")
    u.add_argument("--team", required=True)
    u = usub.add_parser("set-password", help="set a user's password (read from standard input)")
    u.add_argument("name")
    for verb, text in (("disable", "stop a user from logging in or using tokens"), ("enable", "let a user in again")):
        usub.add_parser(verb, help=text).add_argument("name")

    p = command("token", cmd_token, "manage API tokens")
    tsub = p.add_subparsers(dest="token_command", required=True)
    t = tsub.add_parser("create", help="create an API token for a user and print it (shown once)")
    t.add_argument("user", metavar="NAME", help="the user who owns the token")
    t.add_argument("--label", default="command line", help="what the token is for (default: command line)")
    t = tsub.add_parser("revoke", help="revoke a token by id")
    t.add_argument("id", type=int)
    t = tsub.add_parser("list", help="list a user's tokens")
    t.add_argument("user", metavar="NAME")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    level = (args.log_level or "INFO").upper()
    logging.basicConfig(level=level, format="%(asctime)s %(levelname)s %(name)s: %(message)s")
    if level != "DEBUG":
        logging.getLogger("alembic").setLevel(logging.WARNING)
    try:
        return args.func(args)
    except CliError as exc:
        print(f"railsign: {exc}", file=sys.stderr)
        return exc.code
    except ServiceError as exc:
        print(f"railsign: {exc.message}", file=sys.stderr)
        for d in exc.details:
            print(f"  {d.get('field', '')}: {d.get('message', '')}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except OperationalError as exc:
        print(f"railsign: cannot reach the database: {str(exc.orig).strip().splitlines()[0]}", file=sys.stderr)
        return EXIT_NO_DATABASE
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    sys.exit(main())
