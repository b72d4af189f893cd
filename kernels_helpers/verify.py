"""Re-run a record from the raw files and say, number by number, whether the results still match.

A record embeds its results JSON and the interpretation it was made with. ``verify_record`` reads
both, re-runs :func:`interpret` on the project folder with that interpretation, and compares:

* every raw file's SHA-256 (a changed or missing file is named);
* every number of the results (stages, picks, envelopes, sensitivity, design values). With the same
  software versions the numbers must be bit-identical; across versions they are compared with the
  tolerance :data:`REL_TOL` (relative) and :data:`ABS_TOL` (absolute, in the result's own unit);
* what a reader sees: every table cell, text block, heading and plotted point of the record's
  sections, rebuilt from the re-run by the functions the workbook used (:mod:`.views.visible`);
  an edit of a visible number or flag is named by section, table, row and column.

This module re-renders the record's sections, so it imports the views (Bokeh): it is not part of
the pure core.
"""

from __future__ import annotations

import json
import math
import os
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import RecordError, ShearbookError
from .interpretation import from_dict
from .pipeline import interpret
from .project import load_project
from .readings import sha256_of
from .signatures import AllowedSigner, Check, check_history, read_allowed_signers

__all__ = ["ABS_TOL", "REL_TOL", "Runner", "Verification", "read_record", "verify_folder", "verify_record"]

REL_TOL = 1e-6
ABS_TOL = 1e-9
SKIP = ("provenance.platform", "provenance.python", "provenance.versions")  # described, not compared


def _block(text: str, name: str, path: Path) -> Any:
    m = re.search(rf'<script type="application/json" id="{name}">(.*?)</script>', text, re.S)
    if not m:
        raise RecordError(
            f"{path}: not a Shearbook record (no {name} block). Verify only records written by `shearbook record`."
        )
    try:
        return json.loads(m.group(1))
    except json.JSONDecodeError as exc:
        raise RecordError(f"{path}: the {name} block is damaged ({exc}); the record cannot be verified.") from exc


def _text(path: str | Path) -> tuple[Path, str]:
    p = Path(path)
    if not p.is_file():
        raise RecordError(f"{p}: record not found.")
    try:
        return p, p.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise RecordError(f"{p}: not a text file ({exc}); verify only records written by `shearbook record`.") from None


def read_record(path: str | Path) -> tuple[dict[str, Any], dict[str, Any]]:
    """The results JSON and the interpretation JSON embedded in a record, read back through their models
    (:func:`_read_back`): a damaged or edited block raises :class:`RecordError` naming every problem."""
    p, text = _text(path)
    return _blocks(text, p)


def _blocks(text: str, path: Path) -> tuple[dict[str, Any], dict[str, Any]]:
    recorded, interp_json = _block(text, "shearbook-results", path), _block(text, "shearbook-interpretation", path)
    _read_back(recorded, interp_json, path)
    return recorded, interp_json


def record_schema(text: str) -> str:
    """The record's own schema: "shearbook.record/2" and later mark the visible sections."""
    m = re.search(r'<script type="application/json" id="shearbook-record">(.*?)</script>', text, re.S)
    try:
        return str(json.loads(m.group(1)).get("schema", "")) if m else ""
    except (json.JSONDecodeError, AttributeError):
        return ""


def _leaves(value: Any, prefix: str = "") -> Iterator[tuple[str, Any]]:
    if isinstance(value, dict):
        for k in sorted(value):
            yield from _leaves(value[k], f"{prefix}.{k}" if prefix else k)
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield from _leaves(v, f"{prefix}[{i}]")
    else:
        yield prefix, value


def _same(a: Any, b: Any, exact: bool) -> bool:
    if isinstance(a, bool) or isinstance(b, bool) or not isinstance(a, int | float) or not isinstance(b, int | float):
        return a == b
    return a == b if exact else math.isclose(a, b, rel_tol=REL_TOL, abs_tol=ABS_TOL)


@dataclass(frozen=True)
class Verification:
    """The outcome of re-running one record."""

    record: Path
    project: Path
    exact: bool  # same software versions: bit-identical required
    changed_files: tuple[str, ...]
    mismatches: tuple[str, ...]  # "path: recorded -> now"
    compared: int
    notes: tuple[str, ...] = field(default=())
    rerun_error: str | None = None  # the re-run raised: nothing could be compared
    shown: tuple[str, ...] = ()  # differences between what the record shows and the re-run's sections
    shown_compared: int = 0  # visible cells, text blocks and plotted points compared
    signatures: tuple[tuple[str, Check], ...] = ()  # each sign-off step ("checked by X at T") and its check
    trust_checked: bool = False  # an allowed-signers file was given
    require_signed: bool = False

    @property
    def signatures_ok(self) -> bool:
        """No invalid signature; with allowed signers no unknown key; with require_signed no unsigned step."""
        bad = {"invalid"} | ({"unknown key"} if self.trust_checked else set()) | (
            {"unsigned"} if self.require_signed else set())
        return not any(c.status in bad for _, c in self.signatures)

    @property
    def ok(self) -> bool:
        return not self.changed_files and not self.mismatches and not self.shown and self.rerun_error is None

    @property
    def mode(self) -> str:
        if self.rerun_error is not None:
            return "re-run failed"
        return "exact" if self.exact else f"rel {REL_TOL:g}"

    def to_text(self) -> str:
        if self.rerun_error is not None:
            head = "the re-run failed, no values compared"
        else:
            head = f"{self.compared} values compared, " + (
                "bit-identical (same versions)" if self.exact
                else f"within rel {REL_TOL:g} / abs {ABS_TOL:g} (versions differ)")
            head += f"; {self.shown_compared} shown cells, texts and plotted points compared"
        lines = [f"{self.record}: {'MATCH' if self.ok else 'MISMATCH'} - {head}"]
        if self.signatures:
            verdict = "signatures ok" if self.signatures_ok else "SIGNATURES FAIL"
            lines.append(f"  sign-off ({verdict}" + ("" if self.trust_checked else
                                                     "; signers not checked: give --allowed-signers") + "):")
            lines += [f"    {step}: {check.text}" for step, check in self.signatures]
        lines += [f"  raw file changed: {f}" for f in self.changed_files]
        if self.rerun_error is not None:
            lines.append(f"  re-run failed: {self.rerun_error}")
        lines += [f"  moved: {m}" for m in self.mismatches[:50]]
        if len(self.mismatches) > 50:
            lines.append(f"  ... and {len(self.mismatches) - 50} more")
        lines += [f"  shown: {m}" for m in self.shown[:50]]
        if len(self.shown) > 50:
            lines.append(f"  ... and {len(self.shown) - 50} more shown differences")
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines) + "\n"


def _read_back(recorded: Any, interp_json: Any, path: Path) -> None:
    """The record's two data blocks read back through their models: a damaged or hand-edited block is named,
    key by key, before anything is compared (never a fault inside Shearbook, never a quiet comparison of less)."""
    from .file_models import check_interpretation_data, check_results_data

    problems = check_results_data(recorded, "results")[1] + check_interpretation_data(interp_json, "interpretation")[1]
    if problems:
        raise RecordError(f"{path}: the record's embedded data is damaged or was edited, {len(problems)} problem(s); "
                          "the record cannot be verified (ask for the record as it was written, or make a new "
                          "one with `shearbook record`):\n" + "\n".join(
                              f"  {p.file}{'' if not p.path or p.path.startswith('[') else '.'}{p.path}: "
                              + p.message.removesuffix("; add it") for p in problems))


def signature_checks(recorded: dict[str, Any], interp_json: dict[str, Any],
                     allowed: list[AllowedSigner] | None) -> tuple[tuple[str, Check], ...]:
    """Every sign-off step of the record's interpretation, checked against the record's own data."""
    steps = interp_json.get("signoff", {}).get("history", [])
    checks = check_history(steps, recorded.get("provenance", {}).get("raw_files", {}), interp_json, recorded, allowed)
    return tuple((f"{s.get('state')} by {s.get('who')} at {s.get('time_utc')}", c)
                 for s, c in zip(steps, checks, strict=True) if s.get("state") != "draft")


def verify_record(record: str | Path, project_dir: str | Path, allowed_signers: str | Path | None = None,
                  require_signed: bool = False) -> Verification:
    """Re-execute the interpretation of ``record`` on ``project_dir`` and compare every number.

    The sign-off steps' signatures are checked against the record's own data, and their signers
    against ``allowed_signers`` (OpenSSH's allowed_signers format) when given.
    """
    allowed = read_allowed_signers(Path(allowed_signers)) if allowed_signers else None
    rec_path, root = Path(record).resolve(), Path(project_dir).resolve()
    rec_path, text = _text(rec_path)
    recorded, interp_json = _blocks(text, rec_path)
    signed = {"signatures": signature_checks(recorded, interp_json, allowed), "trust_checked": allowed is not None,
              "require_signed": require_signed}
    project = load_project(root)
    then_files = recorded["provenance"]["raw_files"]
    now_files = {name: {"sha256": sha256_of(root / name)} for name in then_files
                 if (root / name).resolve().is_relative_to(root) and (root / name).is_file()}
    changed = tuple(
        f"{name} (SHA-256 was {info['sha256'][:16]}..., now "
        + (f"{now_files[name]['sha256'][:16]}...)" if name in now_files else "missing)")
        for name, info in sorted(then_files.items())
        if now_files.get(name, {}).get("sha256") != info["sha256"]
    )
    try:
        interpretation = from_dict(interp_json, f"{rec_path} (embedded interpretation)")
        results = interpret(project, interpretation)
    except ShearbookError as exc:
        return Verification(rec_path, root, False, changed, (), 0, rerun_error=str(exc), **signed)
    now = json.loads(results.to_json())
    versions_then = (recorded["provenance"].get("versions"), recorded["provenance"].get("python"))
    exact = versions_then == (now["provenance"]["versions"], now["provenance"]["python"])
    a = {k: v for k, v in _leaves(recorded) if not k.startswith(SKIP)}
    b = {k: v for k, v in _leaves(now) if not k.startswith(SKIP)}
    # a newer Shearbook may give results the record's version did not have: across versions those are not
    # compared (and said so); a value the record holds and the re-run lacks is always a mismatch
    added = [] if exact else sorted(set(b) - set(a))
    mismatches = [f"{k}: {a.get(k)!r} -> {b.get(k)!r}" for k in sorted(set(a) | set(b))
                  if k not in added and (k not in a or k not in b or not _same(a[k], b[k], exact))]
    notes: tuple[str, ...] = () if exact else (
        f"software versions differ: recorded {versions_then[0]}, now {now['provenance']['versions']}",
    )
    if added:
        notes += (f"{len(added)} value(s) this version gives and the record's did not, not compared: "
                  + ", ".join(added[:5]) + (" ..." if len(added) > 5 else ""),)
    shown, shown_compared, shown_notes = _visible(text, results, project, interpretation, exact)
    return Verification(rec_path, root, exact, changed, tuple(mismatches), len(a), notes + shown_notes,
                        shown=tuple(shown), shown_compared=shown_compared, **signed)


def _visible(text: str, results: Any, project: Any, interpretation: Any,
             exact: bool) -> tuple[list[str], int, tuple[str, ...]]:
    """What the record shows against the re-run's sections; records before schema 2 mark no sections."""
    if record_schema(text) in ("", "shearbook.record/1"):
        return [], 0, ("this record marks no visible sections (record schema 1, an older Shearbook): only its "
                       "embedded data was compared, not the tables and plots a reader sees",)
    from .views.sections import Context
    from .views.visible import compare_visible

    lines, compared = compare_visible(text, Context(results, project, interpretation), exact)
    notes = () if exact or not lines else (
        "versions differ: a shown difference may be the newer version's wording or rounding; compare by eye",)
    return lines, compared, notes


def project_of(record: Path) -> Path:
    """The project folder of a record: the nearest folder above it holding project.toml."""
    for folder in record.resolve().parents:
        if (folder / "project.toml").is_file():
            return folder
    raise RecordError(
        f"{record}: no project.toml in any folder above this record; name the project folder with --project."
    )


Task = tuple[Path, Path | None, Path | None, bool]  # record, project (None: found above it), allowed signers, require


def _verify_one(args: Task) -> tuple[Path, Verification | None, str]:
    """One record of a batch; runs in a worker process (local pool or dask worker): never raises."""
    record, project, allowed, require = args
    try:
        return record, verify_record(record, project or project_of(record), allowed, require), ""
    except Exception as exc:  # a batch reports every record; one broken record must not stop the others
        return record, None, f"{type(exc).__name__}: {exc}"


Outcome = tuple[Path, Verification | None, str]


@dataclass(frozen=True)
class Runner:
    """Where a batch of records is verified.

    The default is a pool of local processes (``jobs``, default all cores). ``scheduler`` names an
    existing dask.distributed cluster (``tcp://host:8786``); ``workers`` starts a local dask cluster of
    that many worker processes. On a cluster every worker needs Shearbook installed and read access to
    the records and projects at the same paths as this machine (a shared file system).
    """

    jobs: int | None = None
    scheduler: str | None = None
    workers: int | None = None
    connect_timeout_s: float = 20.0  # how long to wait for the scheduler at ``scheduler``

    def describe(self) -> str:
        if self.scheduler:
            return f"the dask cluster at {self.scheduler}"
        if self.workers:
            return f"a local dask cluster of {self.workers} worker(s)"
        return f"{self.jobs or os.cpu_count() or 1} local process(es)"

    def run(self, tasks: list[Task]) -> Iterator[Outcome]:
        """Each task's outcome, in the order they finish."""
        if self.scheduler or self.workers:
            yield from _on_dask(tasks, self.scheduler, self.workers, self.connect_timeout_s)
            return
        from concurrent.futures import ProcessPoolExecutor, as_completed

        with ProcessPoolExecutor(max_workers=self.jobs or os.cpu_count() or 1) as pool:
            for fut in as_completed([pool.submit(_verify_one, t) for t in tasks]):
                yield fut.result()


def _on_dask(tasks: list[Task], scheduler: str | None, workers: int | None,
             timeout_s: float) -> Iterator[Outcome]:
    try:
        from distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise RecordError("verifying on a dask cluster needs dask.distributed: pip install 'shearbook[cluster]' "
                          "(or pip install distributed).") from None
    import contextlib
    import logging

    with contextlib.ExitStack() as stack:
        if scheduler:
            try:
                client = stack.enter_context(Client(scheduler, timeout=f"{timeout_s}s"))
            except (OSError, TimeoutError, ValueError) as exc:
                raise RecordError(f"--scheduler {scheduler}: no dask scheduler answered ({exc}). Check the address "
                                  "(tcp://HOST:PORT) and that the scheduler is running.") from None
        else:
            # the scheduler's HTTP server on a free port (its default, 8787, may be taken by another cluster)
            cluster = stack.enter_context(LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                                       dashboard_address="127.0.0.1:0", silence_logs=logging.ERROR))
            client = stack.enter_context(Client(cluster))
        futures = {client.submit(_verify_one, t, pure=False): t for t in tasks}
        for fut in as_completed(futures):
            if fut.status == "finished":
                yield fut.result()
            else:  # the worker died or could not run the task: report it as this record's error
                exc = fut.exception()
                yield futures[fut][0], None, f"{type(exc).__name__} on the cluster: {exc}"


def verify_folder(folder: str | Path, summary_csv: str | Path, project: str | Path | None = None,
                  jobs: int | None = None, progress: Any = None, runner: Runner | None = None,
                  allowed_signers: str | Path | None = None, require_signed: bool = False) -> list[Outcome]:
    """Verify every ``*.html`` record under ``folder`` in parallel; write a CSV summary table.

    ``runner`` says where (local processes by default, or a dask cluster); ``jobs`` is the number of
    local processes when no runner is given. ``progress`` is called as ``progress(done, total, record)``
    after each record.
    """
    import csv

    records = sorted(Path(folder).rglob("*.html"))
    if not records:
        raise RecordError(f"{folder}: no .html records under this folder.")
    proj = Path(project).resolve() if project else None
    runner = runner or Runner(jobs=jobs)
    out: list[Outcome] = []
    allowed = Path(allowed_signers).resolve() if allowed_signers else None
    if allowed is not None:
        read_allowed_signers(allowed)  # a bad file is said once, before any record is run
    tasks: list[Task] = [(r.resolve(), proj, allowed, require_signed) for r in records]
    for done, outcome in enumerate(runner.run(tasks), start=1):
        out.append(outcome)
        if progress:
            progress(done, len(records), outcome[0])
    out.sort(key=lambda item: str(item[0]))
    path = Path(summary_csv)
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["record", "project", "status", "changed_raw_files", "values_moved", "values_compared",
                    "shown_differences", "shown_compared", "mode", "signatures", "error"])
        for rec, v, err in out:
            if v is None:
                w.writerow([rec, "", "error", "", "", "", "", "", "", "", err])
            else:
                w.writerow([rec, v.project, "match" if v.ok else "mismatch", "; ".join(v.changed_files),
                            len(v.mismatches), v.compared, len(v.shown), v.shown_compared, v.mode,
                            "; ".join(f"{s}: {c.status}" for s, c in v.signatures), v.rerun_error or ""])
    return out
