"""The controller of the live workbook: one Interpretation, edited by the widgets, saved at once.

The controller holds the project, the readings (read and hashed once), the stage results and the
:class:`~kernels_helpers.interpretation.Interpretation` - the single source of truth. An edit
(a pick moved, a stage excluded, a note written, c' = 0 switched on) goes through one of the
Interpretation's edit methods; the controller then re-analyses only the stage it touches
(:func:`~kernels_helpers.pipeline.analyse_stage`), assembles new results
(:func:`~kernels_helpers.pipeline.assemble_results`, the same tail as ``interpret``), saves the
interpretation atomically with who and when and the raw-file hashes, and tells its listeners
(the figures and widgets) to redraw.

Every edit is idempotent: repeating it, or receiving the echo of our own redraw, changes nothing
and writes nothing (jupyter_bokeh calls Python callbacks twice and echoes Python's own writes).
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd

from .decisions import Cohesion
from .errors import ShearbookError
from .interpretation import INTERPRETATION_FILE, Interpretation, PickKind, check_stage_ids, load_interpretation
from .picks import at_point
from .pipeline import analyse_stage, assemble_results, provenance, read_all, stage_units
from .project import load_project
from .readings import sha256_of
from .results import Results, StageResult
from .reversal import end_of_pass_window
from .revisions import ConcurrentEditError, Saved, save_checked
from .stage_checks import consolidation_of

__all__ = ["Controller"]

Listener = Callable[[Results, frozenset[str]], None]


class Controller:
    """Edits of one project's interpretation, each saved at once and followed by new results.

    Parameters
    ----------
    project_dir
        The project folder (holds ``project.toml``).
    interpretation_path
        The interpretation file; None for the project's own ``interpretation.json``. Opening it
        restores every decision; nothing is written until the first edit.
    author
        Who makes the decisions (recorded with each one); edits are refused while it is empty.
    """

    def __init__(self, project_dir: str | Path, interpretation_path: str | Path | None = None,
                 author: str = "") -> None:
        self.project = load_project(project_dir)
        self.path = Path(interpretation_path or self.project.root / INTERPRETATION_FILE)
        self.interpretation = load_interpretation(self.path)
        check_stage_ids(self.interpretation, [s.id for s in self.project.stages], str(self.path))
        self.author = author
        self.unsaved = ""  # an edit refused because the file changed on disk, shown until a reload
        self.message = ""  # the last refusal or confirmation, in words
        self.reasons: dict[str, str] = {}  # per stage: the reason the engineer typed for a manual pick
        self.history: list[Interpretation] = []
        self.last_refresh_s = 0.0  # time of the last edit: analysis + refit + save + redraw
        self._listeners: list[Listener] = []
        self._early: list[Listener] = []  # shown before the save (the plots), see :meth:`show_before_save`
        self.readings = read_all(self.project)
        units = stage_units(self.project, self.readings)
        self._units = {spec.id: (spec, part, continued) for spec, part, continued in units}
        # each stage's consolidation readings, read and analysed once like the shearing readings
        self._consolidation = {sid: consolidation_of(spec) for sid, (spec, _, _) in self._units.items()}
        self._origin: dict[str, float | None] = {}
        self._analysed: dict[str, StageResult] = {}
        self._snapped: dict[tuple[str, float], float] = {}
        origin: float | None = None
        for sid, (_, _, continued) in self._units.items():
            self._origin[sid] = origin if continued else None
            self._analysed[sid] = self._analyse(sid, self.interpretation)
            if not continued:
                origin = self._analysed[sid].reduced.seating_shift_mm
        self.results = self._assemble(self.interpretation)

    # --- reading the state ---------------------------------------------------------------------

    @property
    def stage_ids(self) -> tuple[str, ...]:
        return tuple(self._units)

    def stage(self, stage_id: str) -> StageResult:
        """The stage as the results show it (with the flags that compare stages)."""
        return self.results.stage(stage_id)

    def row_of_line(self, stage_id: str) -> Callable[[int], int | None]:
        """For the stage's readings: the row of a file line its flags name (None: not one of its rows)."""
        part = self._units[stage_id][1]

        def row(line: int) -> int | None:
            if part.lines is None:
                r = line - part.first_data_line
                return r if 0 <= r < len(part.table) else None
            hits = np.flatnonzero(np.asarray(part.lines) == line)
            return int(hits[0]) if hits.size else None
        return row

    def subscribe(self, listener: Listener) -> None:
        """Call ``listener(results, changed_stage_ids)`` after every edit that changed something."""
        self._listeners.append(listener)

    def show_before_save(self, listener: Listener) -> None:
        """Call ``listener(results, changed_stage_ids)`` with an edit's results before its save.

        The plots can then reach the page while the file is written. When the save is refused, the
        listener is called again with the results as they stand (what the file holds); after a save
        that took other writers' decisions in, again with the results of the merged file. Listeners
        given to :meth:`subscribe` are called only after a save succeeded.
        """
        self._early.append(listener)

    def residual_pick(self, stage_id: str) -> tuple[int, float, float] | None:
        """The residual window in use (pass number, from mm, to mm); None for a stage that is not a reversal test.

        A manual pick is the one saved; the suggestion is the end of the pass the rule takes (the later of
        the two forward passes that agree, else the last forward pass), over the part of its travel the
        rule averages.
        """
        s = self.stage(stage_id)
        if s.residual is None:
            return None
        choice = self.interpretation.decision(stage_id).residual
        if choice.source == "manual" and choice.pass_no is not None and choice.x_from_mm is not None \
                and choice.x_to_mm is not None:
            return choice.pass_no, choice.x_from_mm, choice.x_to_mm
        forward = [p.pass_no for p in s.passes if p.forward]
        suggested = s.residual.suggested
        pass_no = (suggested.passes[1] if suggested is not None and suggested.passes
                   else (forward[-1] if forward else None))
        if pass_no is None:
            return None
        c = self._pass_rows(stage_id, pass_no)
        window = end_of_pass_window(c["x_mm"].to_numpy(), c["pass_no"].to_numpy(), pass_no)
        return None if window is None else (pass_no, *window)

    # --- the edits (each returns True when it changed and saved the interpretation) ------------

    def _reason_check(self, stage_id: str) -> str | None:
        """None when a manual pick may be made now; else why not ([policy] manual_pick_reason = "require")."""
        if self.project.manual_pick_reason == "require" and not self.reasons.get(stage_id, "").strip():
            return (f"{stage_id}: this project requires a reason for every manual pick ([policy] manual_pick_reason); "
                    "type it in the stage's reason box first, then move the pick again.")
        return None

    def _asked(self, stage_id: str, message: str) -> str:
        return message if self.reasons.get(stage_id, "").strip() else (
            f"{message} - give its reason in the stage's reason box (a manual pick needs one)")

    def move_peak(self, stage_id: str, x_mm: float) -> bool:
        """A manual peak at the reading nearest ``x_mm``; no change if that is the current peak."""
        x = self._snap(stage_id, float(x_mm))
        if x == self.stage(stage_id).peak.chosen.x_mm:
            return self._unchanged(f"{stage_id}: the peak is already at {x:.3f} mm")
        if (why := self._reason_check(stage_id)) is not None:
            return self._refuse(why)
        reason = self.reasons.get(stage_id, "").strip()
        return self._edit(lambda i: i.with_peak(stage_id, x, self.author, reason), stage_id,
                          self._asked(stage_id, f"{stage_id}: peak moved to {x:.3f} mm"))

    def set_window(self, stage_id: str, x_from_mm: float, x_to_mm: float) -> bool:
        """A manual critical-state window, its ends snapped to the nearest readings."""
        lo, hi = sorted(self._snap(stage_id, float(v)) for v in (x_from_mm, x_to_mm))
        cs = self.stage(stage_id).critical_state.chosen
        if (lo, hi) == (cs.x_from_mm, cs.x_to_mm):
            return self._unchanged(f"{stage_id}: the critical-state window is already {lo:.3f}-{hi:.3f} mm")
        if (why := self._reason_check(stage_id)) is not None:
            return self._refuse(why)
        reason = self.reasons.get(stage_id, "").strip()
        return self._edit(lambda i: i.with_critical_state(stage_id, lo, hi, self.author, reason), stage_id,
                          self._asked(stage_id, f"{stage_id}: critical-state window set to {lo:.3f}-{hi:.3f} mm"))

    def set_pick_reason(self, stage_id: str, reason: str) -> bool:
        """The reason for the stage's manual picks: kept for the next pick and written on those already made."""
        self.reasons[stage_id] = reason
        d = self.interpretation.decision(stage_id)
        manual = {k: getattr(d, k) for k in ("peak", "critical_state") if getattr(d, k).source == "manual"}
        if not manual or all(c.note == reason.strip() for c in manual.values()):
            return self._unchanged(f"{stage_id}: reason kept for the next manual pick")
        return self._edit(lambda i: i._edit(stage_id, **{k: dataclasses.replace(c, note=reason.strip())
                                                        for k, c in manual.items()}),
                          stage_id, f"{stage_id}: reason for the manual pick(s) saved")

    def set_residual(self, stage_id: str, pass_no: int, x_from_mm: float, x_to_mm: float) -> bool:
        """A manual residual pick (reversal tests): the window ``x_from_mm``-``x_to_mm`` on forward pass ``pass_no``."""
        s = self.stage(stage_id)
        if s.residual is None:
            return self._refuse(f"{stage_id} is not a reversal test: it has no residual to pick.")
        forward = [p.pass_no for p in s.passes if p.forward]
        if pass_no not in forward:
            return self._refuse(f"{stage_id}: pass {pass_no} is not a forward pass; forward passes are {forward}.")
        lo, hi = sorted(self._snap_on_pass(stage_id, pass_no, float(v)) for v in (x_from_mm, x_to_mm))
        current = self.interpretation.decision(stage_id).residual
        if (current.source, current.pass_no, current.x_from_mm, current.x_to_mm) == ("manual", pass_no, lo, hi):
            return self._unchanged(f"{stage_id}: the residual pick is already pass {pass_no}, {lo:.3f}-{hi:.3f} mm")
        return self._edit(lambda i: i.with_residual(stage_id, pass_no, lo, hi, self.author), stage_id,
                          f"{stage_id}: residual picked on pass {pass_no}, {lo:.3f}-{hi:.3f} mm")

    def back_to_suggestion(self, stage_id: str, pick: PickKind) -> bool:
        if getattr(self.interpretation.decision(stage_id), pick).source == "suggested":
            return self._unchanged(f"{stage_id}: the {pick.replace('_', '-')} pick is already the suggestion")
        return self._edit(lambda i: i.back_to_suggestion(stage_id, pick), stage_id,
                          f"{stage_id}: {pick.replace('_', '-')} pick back to the suggestion")

    def exclude(self, stage_id: str, reason: str) -> bool:
        """Exclude a stage from the envelopes; refused (with a message) without a reason."""
        reason = reason.strip()
        if not reason:
            return self._refuse(f"{stage_id} was not excluded: type the reason for excluding it first.")
        d = self.interpretation.decision(stage_id)
        if not d.included and d.exclusion_reason == reason:
            return self._unchanged(f"{stage_id} is already excluded for that reason")
        return self._edit(lambda i: i.excluded(stage_id, reason, self.author), stage_id,
                          f"{stage_id} excluded: {reason}")

    def restore(self, stage_id: str) -> bool:
        if self.interpretation.decision(stage_id).included:
            return self._unchanged(f"{stage_id} is already included")
        return self._edit(lambda i: i.restored(stage_id, self.author), stage_id, f"{stage_id} included again")

    def use_critical_state(self, stage_id: str, reason: str) -> bool:
        """Put a critical state flagged "not reached" back in the fit (a reason is required); "" takes it out."""
        if self.interpretation.decision(stage_id).critical_state_reason == reason:
            return self._unchanged(f"{stage_id}: no change")
        words = f"critical state used in the fit: {reason}" if reason.strip() else "critical state left out again"
        return self._edit(lambda i: i.with_critical_state_used(stage_id, reason, self.author), stage_id,
                          f"{stage_id}: {words}")

    def set_note(self, stage_id: str, note: str) -> bool:
        if self.interpretation.decision(stage_id).note == note:
            return self._unchanged(f"{stage_id}: note unchanged")
        return self._edit(lambda i: i.with_note(stage_id, note, self.author), stage_id, f"{stage_id}: note saved")

    def set_cohesion(self, cohesion: Cohesion) -> bool:
        """Which fit gives the reported c' and phi': c' free or through the origin (c' = 0)."""
        fit = self.interpretation.settings.fit
        words = "c' = 0 (envelopes through the origin)" if cohesion == Cohesion.ORIGIN else "c' free"
        if fit.cohesion == cohesion:
            return self._unchanged(f"the reported fits are already {words}")

        def edit(i: Interpretation) -> Interpretation:
            settings = dataclasses.replace(i.settings, fit=dataclasses.replace(fit, cohesion=cohesion))
            return dataclasses.replace(i, settings=settings)

        return self._edit(edit, None, f"reported fits: {words}")

    def sign_off(self, state: Literal["draft", "checked", "approved"], note: str = "") -> bool:
        """Record the next sign-off step by the author (draft -> checked -> approved, or back to draft).

        The same rules as ``shearbook signoff``; a signed step (an OpenSSH signature) is made there.
        """
        return self._edit(lambda i: i.with_signoff(state, self.author, note), None,
                          f"sign-off: {state} by {self.author} saved")

    def undo(self) -> bool:
        """Go back to the interpretation before the last change (saved at once, like any edit)."""
        if not self.history:
            return self._refuse("nothing to undo")
        before = self.history[-1]
        changed = {sid for sid in self._units
                   if before.decision(sid) != self.interpretation.decision(sid)}
        if not self._commit(before, changed, "last change undone", remember=False):
            return False
        self.history.pop()
        return True

    # --- the machinery -------------------------------------------------------------------------

    def _refuse(self, message: str) -> bool:
        self.message = message
        return False

    def _unchanged(self, message: str) -> bool:
        """Nothing to do (a repeated callback, an echo): the status line keeps the last real event."""
        del message  # kept at the call sites: it says why nothing happens
        return False

    def _edit(self, change: Callable[[Interpretation], Interpretation], stage_id: str | None, message: str) -> bool:
        if not self.author.strip():
            return self._refuse("type your name in the author box first: every decision records who made it.")
        try:
            new = change(self.interpretation)
        except ValueError as exc:
            return self._refuse(f"refused: {exc}")
        return self._commit(new, {stage_id} if stage_id else set(), message)

    def _commit(self, new: Interpretation, changed: set[str], message: str, remember: bool = True) -> bool:
        start = time.perf_counter()
        old = self.interpretation
        if (new.settings.reduction, new.settings.picks) != (old.settings.reduction, old.settings.picks):
            changed = set(self._units)  # every stage's picks follow these settings (the fit settings: no stage)
        new = new.with_raw_files(self._hashes(new, changed))
        changed |= {sid for sid, (spec, _, _) in self._units.items()  # stages sharing a file whose hash was renewed
                    if new.raw_files.get(spec.relpath) != old.raw_files.get(spec.relpath)}
        try:
            fresh = {sid: self._analyse(sid, new) for sid in changed}
        except ValueError as exc:  # e.g. a window holding too few readings: nothing is saved
            return self._refuse(f"refused: {exc}")
        shown = self._assemble(new, {**self._analysed, **fresh})
        failed_to_show: Exception | None = None
        try:
            self._show_early(new, shown, changed)  # the plots go to the page while the file is written
        except Exception as exc:  # a fault in drawing must not cost the edit: save first, then raise it
            failed_to_show = exc
        # every edit is a change of what this screen last read or saved: that is the base of the save
        saved = self._save(dataclasses.replace(new, revision=old.revision, loaded=old.loaded), message)
        if saved is None:
            self._tell(self._early, self.results, changed)  # back to what the file holds
        taken = saved is not None and self._take(saved, shown, fresh, changed, message, remember, start)
        if failed_to_show is not None:
            raise failed_to_show
        return taken

    def _take(self, saved: Saved, shown: Results, fresh: dict[str, StageResult], changed: set[str], message: str,
              remember: bool, start: float) -> bool:
        """After a save: the state this screen holds becomes the file's, and the listeners are told."""
        new = saved.interpretation
        also = self._merged_stages(saved.merged) - changed
        fresh.update({sid: self._analyse(sid, new) for sid in also})
        changed |= also
        if saved.merged:
            message += f" (also taken from the file, saved meanwhile by another writer: {', '.join(saved.merged)})"
        if remember:
            self.history.append(self.interpretation)
        self.interpretation = new
        self._analysed.update(fresh)
        if saved.merged:
            self.results = self._assemble(new)
            self._tell(self._early, self.results, changed)
        else:  # the same decisions: only the saved file's hash in the provenance is new
            self.results = dataclasses.replace(shown, provenance=provenance(self.project, self.readings, new))
        self.message = message
        self._tell(self._listeners, self.results, changed)
        self.last_refresh_s = time.perf_counter() - start
        return True

    def _show_early(self, interp: Interpretation, results: Results, changed: set[str]) -> None:
        """Call the listeners shown before a save, with the controller reading as the edit will leave it."""
        before = self.interpretation, self.results
        self.interpretation, self.results = interp, results
        try:
            self._tell(self._early, results, changed)
        finally:
            self.interpretation, self.results = before

    @staticmethod
    def _tell(listeners: list[Listener], results: Results, changed: set[str]) -> None:
        for listener in listeners:
            listener(results, frozenset(changed))

    def _save(self, new: Interpretation, message: str) -> Saved | None:
        """Save against the revision this screen read; on a clash keep the edit unsaved and say so."""
        try:
            saved = save_checked(new, self.path)
        except ConcurrentEditError as exc:
            self.unsaved = message.removesuffix(" saved")
            self._refuse(f"not saved: {exc} Press 'reload from file' to see the file as it is now; your edit "
                         f"(\"{self.unsaved}\") stays on this screen until then.")
            return None
        except ShearbookError as exc:  # a file that cannot be read is never overwritten
            self.unsaved = message.removesuffix(" saved")
            self._refuse(f"not saved: {exc}")
            return None
        self.unsaved = ""
        return saved

    def _merged_stages(self, merged: tuple[str, ...]) -> set[str]:
        """The stages to analyse again after a save took other writers' decisions from the file."""
        if any(m in ("settings.reduction", "settings.picks") for m in merged):
            return set(self._units)
        named = {m.removeprefix("stage ") for m in merged if m.startswith("stage ")}
        files = {m.removeprefix("raw file ") for m in merged if m.startswith("raw file ")}
        return {sid for sid, (spec, _, _) in self._units.items() if sid in named or spec.relpath in files}

    def reload(self) -> bool:
        """Read the interpretation file again (after another writer saved) and show what it holds now."""
        try:
            fresh = load_interpretation(self.path)
        except ShearbookError as exc:
            return self._refuse(f"not reloaded: {exc}")
        check_stage_ids(fresh, list(self._units), str(self.path))
        self.interpretation = fresh
        self.history.clear()  # undo steps were made on the old state
        self._analysed = {sid: self._analyse(sid, fresh) for sid in self._units}
        self.results = self._assemble(fresh)
        lost, self.unsaved = self.unsaved, ""
        lost_text = f"; your edit (\"{lost}\") was not saved: make it again if it still applies" if lost else ""
        self.message = f"reloaded {self.path.name} (revision {fresh.revision}){lost_text}"
        self._tell(self._listeners, self.results, set(self._units))
        return True

    def _hashes(self, new: Interpretation, changed: set[str]) -> dict[str, str]:
        """Raw-file hashes to save: every file's first hash, renewed for the stages just decided.

        A file whose hash differs from the saved one keeps its stale flag on the stages nobody
        has looked at since; touching a stage records that its picks were made on the new file.
        """
        hashes = dict(new.raw_files)
        for sid, (spec, part, _) in self._units.items():
            if spec.relpath not in hashes or sid in changed:
                hashes[spec.relpath] = part.sha256
            cons = spec.consolidation  # the consolidation readings are reviewed with the stage
            if cons is not None and cons.file.is_file() and (cons.relpath not in hashes or sid in changed):
                hashes[cons.relpath] = sha256_of(cons.file)
        return hashes

    def _snap(self, stage_id: str, x_mm: float) -> float:
        """The displacement of the reading a pick at ``x_mm`` snaps to (remembered: callbacks come twice)."""
        key = (stage_id, x_mm)
        if key not in self._snapped:
            if len(self._snapped) > 256:
                self._snapped.clear()
            self._snapped[key] = at_point(self._analysed[stage_id].reduced, x_mm).x_mm
        return self._snapped[key]

    def _pass_rows(self, stage_id: str, pass_no: int) -> pd.DataFrame:
        """The shearing readings of one pass (those a residual window averages over)."""
        c = self._analysed[stage_id].reduced.curve
        rows: pd.DataFrame = c.loc[c["in_shear"].to_numpy() & (c["pass_no"].to_numpy() == pass_no)]
        return rows

    def _snap_on_pass(self, stage_id: str, pass_no: int, x_mm: float) -> float:
        """The displacement of the reading of pass ``pass_no`` nearest ``x_mm``."""
        x = self._pass_rows(stage_id, pass_no)["x_mm"].to_numpy()
        return float(x[int(np.argmin(np.abs(x - x_mm)))]) if len(x) else x_mm

    def _analyse(self, stage_id: str, interp: Interpretation) -> StageResult:
        """Analyse one stage; its reduction is reused while the reduction settings stay the same."""
        spec, part, _ = self._units[stage_id]
        known = self._analysed.get(stage_id)
        same = known is not None and interp.settings.reduction == self.interpretation.settings.reduction
        return analyse_stage(spec, part, interp.decision(stage_id), interp.settings, interp.raw_files.get(spec.relpath),
                             self._origin[stage_id], known.reduced if same and known else None,
                             saved_files=interp.raw_files, consolidation=self._consolidation[stage_id])

    def _assemble(self, interp: Interpretation, analysed: dict[str, StageResult] | None = None) -> Results:
        """Results of ``interp`` from the stages analysed (those of this screen unless given), in project order."""
        stages = analysed if analysed is not None else self._analysed
        return assemble_results(self.project, self.readings, interp, tuple(stages[sid] for sid in self._units))
