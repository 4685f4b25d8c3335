"""The scenario being edited: TOML text, its tomlkit document, file path, undo history, validation,
recent files and autosave to a recovery file.

Every edit goes into the tomlkit document (so comments, order and formatting of the user's file
survive) and is pushed as an undoable command holding the text before and after. After each change
the text is validated by :func:`sim.io.scenario.parse_scenario`; invalid text is kept and reported, never
rejected. No modelling here: conversions and checks all come from ``sim``.

Key paths are tuples of table keys and array indices, e.g. ``("transitions", 0, "rate")``; the
edits at key paths are :mod:`gui.toml_edit`'s.
"""

from __future__ import annotations

import hashlib
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable

import tomlkit
from PySide6.QtCore import QObject, QSettings, QStandardPaths, QTimer, Signal
from PySide6.QtGui import QUndoCommand, QUndoStack
from tomlkit.exceptions import TOMLKitError
from tomlkit.toml_document import TOMLDocument

from gui.problem_words import describe_problem
from gui.toml_edit import (KeyPath, append_table, display_value, get_item, remove_table, remove_value, set_value,
                           to_plain)
from sim.io.demo import DEMOS, demo_path
from sim.io.scenario import Scenario, ScenarioError, parse_scenario, problem_text, rename, save_scenario
from sim.io.scenario.schema import SCHEMA, file_keys
from sim.problems import NO_VALUE, Problem, format_key

__all__ = ["ScenarioDocument", "FieldError", "DocumentError", "KeyPath", "format_key", "display_value",
           "BLANK_TEXT", "default_recovery_dir", "set_value", "remove_value", "get_item", "to_plain",
           "append_table", "remove_table"]

RECENT_KEY = "recent_files"
MAX_RECENT = 8

#: File -> New: two states (alive, dead) and the sections the format requires (a population and a
#: horizon); the transitions are the user's to add.
BLANK_TEXT = """format_version = 1
name = "New model"

[[states]]
name = "alive"

[[states]]
name = "dead"
absorbing = true

[population]
initial_state = "alive"
entry_age = { distribution = "fixed", age = 50.0 }

[horizon]
value = 50               # years since entry
"""


def default_recovery_dir() -> Path:
    """``<user data folder>/HazardTrace/recovery`` (``~/.local/share/HazardTrace/recovery`` on Linux).

    Qt's application data location already ends in ``<organisation>/<application>``, which for
    this program doubles the name; the generic data location plus the name once does not."""
    base = QStandardPaths.writableLocation(QStandardPaths.StandardLocation.GenericDataLocation)
    return (Path(base) / "HazardTrace" if base else Path.home() / ".hazardtrace") / "recovery"


# ----------------------------------------------------------------------------- validation problems
@dataclass(frozen=True)
class FieldError:
    """One problem found by the loader, taken from its data (:class:`sim.problems.Problem`), never
    from the wording of its message.

    ``key`` is the key path it concerns in document positions (``()`` for the whole file),
    ``line`` the line in the text, ``message`` the loader's message for it (file, line and key
    path: for the scenario-text view and the command line), ``rule`` the rule alone, ``value``
    what was given, ``text`` the problem in the modeller's words ("Transition 'onset': rate must
    be positive (got −0.5)"), and ``incomplete`` marks a model not finished yet (a state without
    its exits so far, no transitions yet) rather than a wrong value.
    """

    key: KeyPath
    line: int | None
    message: str
    rule: str
    value: Any = field(default=NO_VALUE, compare=False)
    text: str = ""
    incomplete: bool = False

    @property
    def key_text(self) -> str:
        return format_key(self.key)

    def concerns(self, path: KeyPath) -> bool:
        """True when the problem is at ``path`` or inside it."""
        return self.key[:len(path)] == tuple(path)

    @classmethod
    def from_problem(cls, problem: Problem, name_of: Callable[[KeyPath], Any] = lambda _p: None,
                     incomplete: bool = False) -> "FieldError":
        """The problem with its text in the user's words (``name_of`` reads item names)."""
        text = describe_problem(problem.path, problem.rule, problem.value, name_of)
        if incomplete:
            text = "Not finished yet: " + text[0].lower() + text[1:]
        return cls(key=tuple(problem.path), line=problem.line, message=problem_text(problem), rule=problem.rule,
                   value=problem.value, text=text, incomplete=incomplete)


class DocumentError(Exception):
    """A file could not be read or written; the message says which and why."""


# ----------------------------------------------------------------------------- undo
class _TextCommand(QUndoCommand):
    """One edit: the whole text before and after (small files; exact and simple)."""

    def __init__(self, document: "ScenarioDocument", before: str, after: str, label: str,
                 merge_key: str | None = None) -> None:
        super().__init__(label)
        self._document, self.before, self.after, self.merge_key = document, before, after, merge_key

    def redo(self) -> None:
        self._document._apply(self.after)

    def undo(self) -> None:
        self._document._apply(self.before)

    def id(self) -> int:  # noqa: A003 - Qt API
        return 1 if self.merge_key else -1

    def mergeWith(self, other: QUndoCommand) -> bool:  # noqa: N802 - Qt API
        if isinstance(other, _TextCommand) and other.merge_key == self.merge_key:
            self.after = other.after
            return True
        return False


# ----------------------------------------------------------------------------- the document
class ScenarioDocument(QObject):
    """The scenario under edit.

    Signals
    -------
    changed()
        The text changed (edit, undo, redo, open); views re-read it.
    validated(object, list)
        After every change: the :class:`~sim.io.scenario.Scenario` or ``None``, and a list of
        :class:`FieldError` (empty when valid).
    dirty_changed(bool)
        Unsaved changes appeared or went away.
    path_changed(object)
        The file path (``Path`` or ``None``) changed.
    recent_changed()
        The recent-files list changed.
    notice(str)
        A sentence for the user about an edit just made (e.g. how a new hazard family's
        parameters were chosen); the window shows it in its status bar.
    loaded()
        Another scenario was loaded (new, open, new from demo): results of a run belong to the
        previous one.

    Parameters
    ----------
    recovery_dir : folder for autosaved recovery files (default: the platform's application data
        folder, ``recovery`` inside it).
    settings : where the recent-files list lives (default ``QSettings("HazardTrace", "HazardTrace")``).
    autosave_ms : autosave period while there are unsaved changes (0 turns the timer off).
    """

    changed = Signal()
    validated = Signal(object, list)
    dirty_changed = Signal(bool)
    path_changed = Signal(object)
    recent_changed = Signal()
    loaded = Signal()
    notice = Signal(str)

    def __init__(self, parent: QObject | None = None, *, recovery_dir: str | Path | None = None,
                 settings: QSettings | None = None, autosave_ms: int = 5000) -> None:
        super().__init__(parent)
        self._text = ""
        self._data: TOMLDocument | None = None
        self._path: Path | None = None
        self._origin = ""
        self._scenario: Scenario | None = None
        self._errors: list[FieldError] = []
        self._autosaved = ""
        self._settings = settings if settings is not None else QSettings("HazardTrace", "HazardTrace")
        self.relocated: list[tuple[KeyPath, str, str]] = []
        self._loading = False
        self._last_folder: Path | None = None
        self.recovery_dir = Path(recovery_dir) if recovery_dir is not None else default_recovery_dir()
        self.undo_stack = QUndoStack(self)
        self.undo_stack.cleanChanged.connect(self._on_clean_changed)
        self._timer = QTimer(self)
        self._timer.timeout.connect(self.autosave_now)
        if autosave_ms > 0:
            self._timer.start(autosave_ms)

    def _on_clean_changed(self, clean: bool) -> None:
        if clean and not self._loading:  # back to what is saved (undo, save): nothing to recover
            self.discard_recovery()
        self.dirty_changed.emit(not clean)

    # ------------------------------------------------------------------ state
    @property
    def text(self) -> str:
        return self._text

    @property
    def data(self) -> TOMLDocument | None:
        """The parsed document, or ``None`` while the text is not valid TOML."""
        return self._data

    @property
    def path(self) -> Path | None:
        return self._path

    @property
    def dirty(self) -> bool:
        return not self.undo_stack.isClean()

    @property
    def scenario(self) -> Scenario | None:
        """The validated scenario, or ``None`` while there are errors."""
        return self._scenario

    @property
    def errors(self) -> list[FieldError]:
        return list(self._errors)

    @property
    def display_name(self) -> str:
        """File name, or what the untitled document was made from."""
        if self._path is not None:
            return self._path.name
        return f"Untitled ({self._origin})" if self._origin else "Untitled"

    @property
    def suggested_name(self) -> str:
        """A file name to propose in a Save as dialog."""
        if self._path is not None:
            return self._path.name
        return DEMOS.get(self._origin.removeprefix("demo "), "scenario.toml")

    def get(self, path: KeyPath, default: Any = None) -> Any:
        """Plain value at ``path`` (dicts, lists, numbers, strings) or ``default``."""
        item = get_item(self._data, path) if self._data is not None else None
        return default if item is None else to_plain(item)

    def display(self, path: KeyPath) -> str:
        """The value at ``path`` as the user wrote it, for an edit field (``""`` when missing)."""
        return display_value(get_item(self._data, path)) if self._data is not None else ""

    def has(self, path: KeyPath) -> bool:
        return self._data is not None and get_item(self._data, path) is not None

    def table(self, path: KeyPath) -> dict:
        """The table at ``path`` as a dict (``{}`` when missing or not a table)."""
        value = self.get(path)
        return value if isinstance(value, dict) else {}

    def tables(self, array: str) -> list[dict]:
        """The elements of ``[[array]]`` as dicts (``{}`` for an element that is not a table)."""
        value = self.get((array,))
        return [x if isinstance(x, dict) else {} for x in value] if isinstance(value, list) else []

    def names(self, array: str) -> list[str]:
        """The ``name`` of each element of ``[[array]]`` that has a text name."""
        return [t["name"] for t in self.tables(array) if isinstance(t.get("name"), str)]

    # ------------------------------------------------------------------ edits (undoable)
    def edit(self, label: str, change: Callable[[TOMLDocument], Any]) -> bool:
        """Apply ``change`` to a copy of the document and push the result as one undoable command.

        Returns False (and changes nothing) when the text is not valid TOML or nothing changed.
        """
        if self._data is None:
            return False
        doc = tomlkit.parse(self._text)
        change(doc)
        return self._push(tomlkit.dumps(doc), label)

    def set_value(self, path: KeyPath, value: Any, label: str | None = None) -> bool:
        """Set the value at ``path`` (``None`` removes it)."""
        return self.edit(label or f"Set {format_key(path)}", lambda d: set_value(d, tuple(path), value))

    def set_values(self, items: Iterable[tuple[KeyPath, Any]], label: str) -> bool:
        """Several values in one undoable step (``None`` removes)."""
        items = list(items)

        def change(d: TOMLDocument) -> None:
            for path, value in items:
                set_value(d, tuple(path), value)
        return self.edit(label, change)

    def remove(self, path: KeyPath, label: str | None = None) -> bool:
        return self.edit(label or f"Remove {format_key(path)}", lambda d: remove_value(d, tuple(path)))

    def append_table(self, array: str, values: dict, label: str | None = None) -> bool:
        """Append a ``[[array]]`` table."""
        return self.edit(label or f"Add to {array}", lambda d: append_table(d, (array,), values))

    def remove_table(self, array: str, index: int, label: str | None = None) -> bool:
        return self.edit(label or f"Remove {array}[{index}]", lambda d: remove_table(d, (array,), index))

    def rename_state(self, index: int, new: str) -> bool:
        """Rename state ``index`` and every reference to it, wherever the scenario schema says a key
        names a state (:func:`sim.io.scenario.rename`). A name already in use is set without
        touching references, and the loader then reports the duplicate."""
        old = self.get(("states", index, "name"))
        return self.edit(f"Rename state {old!r} to {new!r}", lambda d: rename(d, "states", index, new))

    def rename_transition(self, index: int, new: str) -> bool:
        """Rename transition ``index`` and every reference to it (as :meth:`rename_state`)."""
        old = self.get(("transitions", index, "name"))
        return self.edit(f"Rename transition {old!r} to {new!r}", lambda d: rename(d, "transitions", index, new))

    def set_text(self, text: str, label: str = "Edit scenario text", merge: bool = False) -> bool:
        """Replace the whole text (e.g. typed in the source view); ``merge`` joins consecutive typing."""
        return self._push(text, label, "source" if merge else None)

    def _push(self, after: str, label: str, merge_key: str | None = None) -> bool:
        if after == self._text:
            return False
        self.undo_stack.push(_TextCommand(self, self._text, after, label, merge_key))
        return True

    def _apply(self, text: str) -> None:
        """Show ``text``: parse it for reading, tell the views, validate."""
        self._text = text
        try:
            self._data = tomlkit.parse(text)
        except (TOMLKitError, ValueError):
            self._data = None
        self.changed.emit()
        self.validate()

    def validate(self) -> None:
        """Run the loader on the text and publish the scenario or its problem."""
        try:
            self._scenario = parse_scenario(self._text, self._path)
            self._errors = []
        except ScenarioError as err:
            self._scenario = None
            self._errors = [self._field_error(p) for p in err.problems]
        self.validated.emit(self._scenario, self.errors)

    def _field_error(self, problem: Problem) -> FieldError:
        missing = [k for k, node in SCHEMA.keys.items() if node.required and not self.has((k,))]
        if not problem.path and self._data is not None and missing == ["transitions"]:
            # the file-level "missing transitions" (the only required key missing): shown where
            # the user adds them
            return FieldError(key=("transitions",), line=problem.line, message=problem_text(problem),
                              rule=problem.rule, value=problem.value, incomplete=True,
                              text="Not finished yet: add a transition (Transitions section): the model has none")
        return FieldError.from_problem(problem, self.get, self._is_incomplete(problem))

    def _is_incomplete(self, problem: Problem) -> bool:
        """A model being built rather than a wrong value, read from the document's structure: a
        state no transition touches yet (just added), a living state that no transition leaves
        yet, or no transitions at all."""
        path = tuple(problem.path)
        if self._data is None:
            return False
        if not self.has(("transitions",)) and (path in ((), ("transitions",)) or path[:1] == ("states",)):
            return True
        if len(path) in (2, 3) and path[0] == "states" and isinstance(path[1], int) and path[2:] in ((), ("name",)):
            state = self.get(path[:2])
            if isinstance(state, dict) and isinstance(state.get("name"), str) and state["name"]:
                transitions = self.tables("transitions")
                leaving = {t.get("from") for t in transitions}
                touched = leaving | {t.get("to") for t in transitions}
                return state["name"] not in touched or (not state.get("absorbing") and state["name"] not in leaving)
        return False

    # ------------------------------------------------------------------ files
    def load_text(self, text: str, path: Path | None = None, origin: str = "") -> None:
        """Start afresh from ``text`` (no undo history, no unsaved changes)."""
        old_path = self._path
        self._path = Path(path).resolve() if path is not None else None
        self._origin = origin
        self._autosaved = text
        self._loading = True  # the new file's recovery file stays until the user has been asked
        try:
            self.undo_stack.clear()
            self._apply(text)
            self.undo_stack.setClean()
        finally:
            self._loading = False
        self.dirty_changed.emit(False)
        if self._path != old_path or path is None:
            self.path_changed.emit(self._path)
        self.loaded.emit()

    def open(self, path: str | Path) -> None:
        """Read a scenario file (kept even if invalid: problems are reported, not rejected)."""
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as err:
            raise DocumentError(f"Cannot read {path}: {err}") from None
        self.load_text(text, path)
        self.add_recent(self._path)

    def new_from_demo(self, name: str) -> None:
        """An untitled copy of a bundled demo (saving asks for a file name)."""
        try:
            text = demo_path(name).read_text(encoding="utf-8")
        except (OSError, ValueError) as err:
            raise DocumentError(str(err)) from None
        self.load_text(text, None, origin=f"demo {name}")

    def new_blank(self) -> None:
        """An untitled blank model (:data:`BLANK_TEXT`)."""
        self.load_text(BLANK_TEXT, None, origin="new model")

    @property
    def origin(self) -> str:
        """What an untitled document was made from (``"demo lanthic"``, ``"new model"``), else ``""``."""
        return self._origin

    def save(self) -> Path:
        """Write the text to the current file (atomic: written, flushed and synced to disk, then
        renamed over the file by :func:`sim.io.atomic.write_text_atomic`) and forget the recovery
        file."""
        if self._path is None:
            raise DocumentError("This scenario has no file yet; use Save as.")
        try:
            save_scenario(self._text, self._path)
        except OSError as err:
            raise DocumentError(f"Cannot write {self._path}: {err}") from None
        self.discard_recovery()
        self.undo_stack.setClean()
        self.add_recent(self._path)
        self.validate()  # relative life-table paths now resolve against the new folder
        return self._path

    def save_as(self, path: str | Path) -> Path:
        """Write to ``path`` and make it the document's file.

        Relative file paths (the keys the scenario schema marks as files, e.g. the life table's
        ``file``) are read from the scenario's folder: saved into another folder they are
        rewritten relative to it, as one undoable edit (listed in :attr:`relocated`)."""
        old_recovery = self.recovery_path()
        previous = self._path
        self._path = Path(path).resolve()
        old_dir = previous.parent if previous is not None else Path.cwd()
        self.relocated = self._relocate_files(old_dir, self._path.parent)
        try:
            self.save()
        except DocumentError:
            self._path = previous
            if self.relocated:
                self.undo_stack.undo()
            self.relocated = []
            raise
        if old_recovery.exists() and old_recovery != self.recovery_path():
            old_recovery.unlink(missing_ok=True)
        self._origin = ""
        self.path_changed.emit(self._path)
        return self._path

    def _relocate_files(self, old_dir: Path, new_dir: Path) -> list[tuple[KeyPath, str, str]]:
        """Rewrite relative file paths written for ``old_dir`` so that they name the same files
        from ``new_dir``; returns (key, old text, new text) for each one changed."""
        if self._data is None or old_dir.resolve() == new_dir.resolve():
            return []
        changes = []
        for key in file_keys(self._data.unwrap()):
            text = self.get(key)
            if not text or Path(text).is_absolute():
                continue
            target = os.path.normpath(old_dir / text)
            try:
                new_text = Path(os.path.relpath(target, new_dir)).as_posix()
            except ValueError:  # another drive (Windows): an absolute path
                new_text = Path(target).as_posix()
            if new_text != text:
                changes.append((key, text, new_text))
        if changes:
            self.set_values([(k, new) for k, _, new in changes], "Rewrite file paths for the new folder")
        return changes

    # ------------------------------------------------------------------ recent files
    def recent_files(self) -> list[Path]:
        value = self._settings.value(RECENT_KEY, [])
        if isinstance(value, str):
            value = [value]
        return [Path(p) for p in (value or []) if p]

    def add_recent(self, path: Path) -> None:
        paths = [str(path)] + [str(p) for p in self.recent_files() if str(p) != str(path)]
        self._settings.setValue(RECENT_KEY, paths[:MAX_RECENT])
        self._settings.sync()
        self.recent_changed.emit()

    def dialog_folder(self) -> str:
        """Where a file dialog starts: the folder the user last chose a file in (this session),
        else the scenario's folder, else the working folder."""
        if self._last_folder is not None and self._last_folder.is_dir():
            return str(self._last_folder)
        return str(self._path.parent if self._path is not None else Path.cwd())

    def remember_folder(self, folder: str | Path) -> None:
        """The folder a file dialog was last used in."""
        self._last_folder = Path(folder)

    def clear_recent(self) -> None:
        self._settings.remove(RECENT_KEY)
        self.recent_changed.emit()

    # ------------------------------------------------------------------ autosave and recovery
    def recovery_path(self, path: Any = ...) -> Path:
        """Recovery file of ``path`` (default: the current file; ``None``: an untitled scenario,
        which has one of its own per origin: ``untitled-demo-lanthic.toml``, so that a session on
        one demo is never offered another demo's edits)."""
        if path is ...:
            path = self._path
        if path is None:
            slug = re.sub(r"[^A-Za-z0-9]+", "-", self._origin).strip("-").lower()
            return self.recovery_dir / (f"untitled-{slug}.toml" if slug else "untitled.toml")
        full = str(Path(path).resolve())
        digest = hashlib.sha1(full.encode("utf-8")).hexdigest()[:12]
        return self.recovery_dir / f"{Path(path).stem}-{digest}.toml"

    def autosave_now(self) -> Path | None:
        """Write unsaved text to the recovery file (what the timer calls); returns its path if written.
        With nothing unsaved, a recovery file left from earlier edits is removed."""
        if not self.dirty:
            if self.recovery_path().exists():
                self.discard_recovery()
            return None
        if self._text == self._autosaved:
            return None
        target = self.recovery_path()
        try:
            save_scenario(self._text, target)
        except OSError:
            return None  # the next tick tries again; the text is still in memory
        self._autosaved = self._text
        return target

    def find_recovery(self, path: Any = ...) -> Path | None:
        """A recovery file for ``path`` (default: the current file) that is at least as new as the
        file and differs from the text in memory, or ``None``."""
        target = self.recovery_path(path)
        if path is ...:
            path = self._path
        if not target.exists():
            return None
        try:
            text = target.read_text(encoding="utf-8")
            if path is not None and Path(path).exists():
                if target.stat().st_mtime < Path(path).stat().st_mtime:
                    return None
        except (OSError, UnicodeDecodeError):
            return None
        return None if text == self._text else target

    def restore_recovery(self, recovery: str | Path) -> bool:
        """Take the recovery file's text as an undoable edit (unsaved until the user saves)."""
        try:
            text = Path(recovery).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as err:
            raise DocumentError(f"Cannot read {recovery}: {err}") from None
        return self._push(text, "Restore recovered edits")

    def discard_recovery(self) -> None:
        """Delete the current file's recovery file (after a save, or when the user discards edits)."""
        self.recovery_path().unlink(missing_ok=True)
        self._autosaved = self._text
