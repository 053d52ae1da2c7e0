"""Output folders: what massfit may write over, checked before any work starts.

massfit writes each result (a fit, a plan) into a folder of its own, and it never
deletes or changes anything it did not write. Before any fitting,
:func:`check_output_folder` looks at the folder named for the output:

- a folder that does not exist yet, or an empty one, is used;
- a folder that massfit wrote is replaced only when asked (``--force``), and then only
  the files massfit wrote there: anything else in it is carried over untouched. Such a
  folder is recognised by its record file (``run.json`` of a fit, ``plan.json`` of a
  plan), which lists the files massfit wrote under ``files_written``. A result written
  before that list existed is recognised by its record and summary files; there, only
  files with the names massfit gives its own are taken as massfit's;
- anything else is refused: a folder massfit did not write, the working folder or a
  folder that holds it, a folder that holds an input file, a file, a symbolic link.

The folder is written as a hidden temporary twin beside its final place and renamed
into place at the end (:func:`atomic_folder`), so a half-written folder never looks
complete. Its name is made fresh by :func:`tempfile.mkdtemp`, which never reuses or
follows anything already there.
"""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import tempfile
from pathlib import Path

from massfit.errors import ConfigError

__all__ = ["check_output_folder", "atomic_folder", "massfit_files", "FILES_WRITTEN_KEY",
           "write_json"]

#: Key of the record file that lists the files massfit wrote into the folder.
FILES_WRITTEN_KEY = "files_written"
#: Record files (which list the files written) and, for results written before that
#: list existed, another file such a folder always holds.
_RECORDS = {"run.json": "summary.json", "plan.json": "next_epochs.ecsv",
            "comparison.json": "comparison.txt"}
#: Stems of the files a fit or a plan writes, besides the figures of massfit.plot.figures.
_OWN_STEMS = ("summary", "samples", "run", "observations", "velocities", "parameters",
              "plan", "next_epochs", "precision", "comparison")


def _own_stems() -> set:
    from massfit.plot.figures import FIGURES

    return set(_OWN_STEMS) | set(FIGURES)


def massfit_files(folder) -> set | None:
    """Names of the entries of ``folder`` massfit wrote; None if massfit did not write it."""
    folder = Path(folder)
    for record, marker in _RECORDS.items():
        path = folder / record
        if not path.is_file() or path.is_symlink():
            continue
        try:
            data = json.loads(path.read_text())
        except (OSError, ValueError):
            continue
        if not isinstance(data, dict):
            continue
        listed = data.get(FILES_WRITTEN_KEY)
        if isinstance(listed, list) and all(isinstance(n, str) for n in listed):
            return {n for n in listed if "/" not in n and n not in ("", ".", "..")}
        if (folder / marker).is_file():  # written before the list existed
            stems = _own_stems()
            return {p.name for p in folder.iterdir()
                    if p.is_file() and not p.is_symlink() and p.name.split(".")[0] in stems}
    return None


def _refuse(out, reason, key):
    raise ConfigError(f"'{out}' {reason}", key=key)


def _check_place(out: Path, inputs, key):
    """Refuse a link, a file, or a folder holding an input or the working folder."""
    if out.is_symlink():
        _refuse(out, "is a symbolic link; massfit writes only into a real folder: give "
                     "the folder itself or a new one", key)
    if out.exists() and not out.is_dir():
        _refuse(out, "is a file, not a folder; give a new folder for the output", key)
    ancestor = out.parent
    while not ancestor.exists() and ancestor != ancestor.parent:
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        _refuse(out, f"cannot be made: '{ancestor}' is a file, not a folder", key)
    # os.path.realpath, not Path.resolve: a symlink loop among the inputs stays a path
    # here and is reported by the reader, not raised as a RuntimeError.
    resolved = Path(os.path.realpath(out))
    cwd = Path(os.path.realpath(Path.cwd()))
    if resolved == cwd or resolved in cwd.parents:
        _refuse(out, "is the working folder or holds it; give a new folder for the output",
                key)
    for path in inputs:
        input_path = Path(os.path.realpath(path))
        if resolved == input_path or resolved in input_path.parents:
            _refuse(out, f"holds the input '{path}'; give a new folder for the output",
                    key)


def check_output_folder(out, *, force=False, inputs=(), key="--out") -> None:
    """Refuse, before any work, an output folder massfit may not write.

    Parameters
    ----------
    out : path
        The output folder.
    force : bool
        Replace a folder that massfit wrote before (only the files it wrote).
    inputs : sequence of path
        Input files, which the output folder may not hold.
    key : str
        The option or config key named in a refusal.

    Raises
    ------
    ConfigError
        One sentence naming the folder and what would be accepted.
    """
    out = Path(out)
    _check_place(out, inputs, key)
    if not out.exists() or not any(out.iterdir()):
        return
    own = massfit_files(out)
    if own is None:
        _refuse(out, "exists and was not written by massfit (it has no run.json or "
                     "plan.json listing massfit's files); massfit never writes into such "
                     "a folder: give a new one", key)
    if not force:
        _refuse(out, "already holds a massfit result; choose another folder, or pass "
                     "--force (config: [output] replace_existing = true) to replace the "
                     "files massfit wrote there", key)
    stems = _own_stems()
    for entry in sorted(out.iterdir()):
        if entry.name not in own and entry.name.split(".")[0] in stems:
            _refuse(entry, "was not written by massfit but has a name massfit writes; "
                           "move it out of the output folder first", key)


def write_json(path, data) -> None:
    """Write ``data`` as indented JSON (numpy numbers and arrays as plain JSON)."""
    with open(path, "w") as handle:
        json.dump(data, handle, indent=2, default=_json_default)
        handle.write("\n")


def _json_default(value):
    import numpy as np

    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.bool_):
        return bool(value)
    return str(value)


def _list_files_written(tmp: Path, record: str) -> None:
    """Add the names of every file in ``tmp`` to its record file (``files_written``)."""
    path = tmp / record
    data = json.loads(path.read_text())
    data[FILES_WRITTEN_KEY] = sorted(p.name for p in tmp.iterdir())
    write_json(path, data)


@contextlib.contextmanager
def atomic_folder(out, *, record, force=False, inputs=()):
    """Yield a temporary folder beside ``out`` that replaces ``out`` when the block ends.

    Parameters
    ----------
    out : path
        The output folder; checked with :func:`check_output_folder` first.
    record : str
        The record file (JSON) the block writes into the temporary folder; it gets the
        list of the files written.
    force, inputs
        As for :func:`check_output_folder`.

    A half-written output folder never looks complete: on any error the temporary
    folder is removed and ``out`` is left as it was. When ``out`` holds a result of
    massfit's, the entries massfit did not write are moved into the new folder, which
    then takes the old one's place; the old one, holding only massfit's files, is
    removed.
    """
    out = Path(out)
    check_output_folder(out, force=force, inputs=inputs)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        # mkdtemp makes the folder private; the result gets the usual permissions.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o777 & ~umask)
        yield tmp
        _list_files_written(tmp, record)
        # Checked again: the folder may have changed while the fit ran.
        check_output_folder(out, force=force, inputs=inputs)
        _swap_into_place(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def _swap_into_place(tmp: Path, out: Path) -> None:
    """Rename ``tmp`` to ``out``, carrying over what massfit did not write in ``out``."""
    if not out.exists():
        os.replace(tmp, out)
        return
    own = massfit_files(out) or set()
    theirs = [p for p in sorted(out.iterdir()) if p.name not in own]
    clash = [p for p in theirs if (tmp / p.name).exists()]
    if clash:
        _refuse(clash[0], "was not written by massfit but has a name massfit writes; move "
                          "it out of the output folder first", "--out")
    moved = []
    try:
        for entry in theirs:
            os.rename(entry, tmp / entry.name)
            moved.append(entry.name)
        holder = Path(tempfile.mkdtemp(prefix=f".{out.name}.old-", dir=out.parent))
        os.rename(out, holder / "old")
        try:
            os.rename(tmp, out)
        except BaseException:
            os.rename(holder / "old", out)
            holder.rmdir()
            raise
    except BaseException:
        for name in moved:  # the user's entries go back where they were
            os.rename(tmp / name, out / name)
        raise
    shutil.rmtree(holder)
