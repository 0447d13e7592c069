"""Writing output files without losing anything.

Two rules keep a user's files safe:

* **No output on an input, no two outputs on one path.**  :func:`check_outputs`
  compares the resolved paths (symbolic links followed) and, for files that
  exist, their device and inode (hard links), and raises a
  :class:`~perftest.errors.PerftestError` naming both options before any work is
  done.
* **A failed write leaves the previous file as it was.**  :func:`write_atomic`
  writes to a temporary file in the target's folder and renames it over the
  target (``os.replace``, atomic on POSIX and Windows on one file system).  When
  the write fails (disk full, file-size limit, no permission) the temporary file
  is removed, the old output is untouched and the error names the file.
"""

from __future__ import annotations

import fnmatch
import os
import tempfile
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path

from perftest.errors import PerftestError

__all__ = ["write_atomic", "check_outputs", "same_file", "report_paths", "OutputPattern"]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_atomic(path, content, *, encoding: str = "utf-8") -> Path:
    """Write ``content`` to ``path`` through a temporary file and a rename.

    Parameters
    ----------
    path : str or Path
        The output file; its folder is created when missing.
    content : str or bytes
        Text (encoded with ``encoding``) or bytes.
    encoding : str, default "utf-8"

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    PerftestError
        When the file cannot be written; the message names it and says that the
        previous version, if any, was kept.
    """
    path = Path(path)
    data = content.encode(encoding) if isinstance(content, str) else bytes(content)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise PerftestError(
            f"{path}: cannot create its folder {path.parent}: {exc.strerror or exc}.", file=path
        ) from None
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        # mkstemp makes the file private (0600); an output gets the usual mode.
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except OSError as exc:
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass
        kept = " The previous file was left as it was." if path.exists() else ""
        raise PerftestError(
            f"{path}: cannot write: {exc.strerror or exc}.{kept}", file=path
        ) from None
    return path


def same_file(a, b) -> bool:
    """True when ``a`` and ``b`` name one file: equal resolved paths (symbolic
    links followed) or, for existing files, the same device and inode (hard links)."""
    pa, pb = Path(a), Path(b)
    try:
        if pa.resolve() == pb.resolve():
            return True
    except OSError:  # a symlink loop: compare as written
        if os.path.abspath(pa) == os.path.abspath(pb):
            return True
    try:
        return pa.exists() and pb.exists() and os.path.samefile(pa, pb)
    except OSError:
        return False


@dataclass(frozen=True)
class OutputPattern:
    """Files a job writes into ``folder`` under names it chooses as it goes.

    ``perftest report`` writes its figures as ``figures/<stem>.png`` with stems that
    depend on the data (``stability_2`` ...): :func:`check_outputs` refuses an input
    or another output that such a name would overwrite, and a ``folder`` that is a
    file.

    Attributes
    ----------
    folder : Path
    glob : str
        Shell pattern of the file names (``"*.png"``).
    """

    folder: Path
    glob: str

    def __str__(self) -> str:
        return str(Path(self.folder) / self.glob)

    def matches(self, path) -> bool:
        """Whether writing under this pattern could replace ``path``."""
        path = Path(path)
        if not fnmatch.fnmatch(path.name, self.glob):
            return False
        return same_file(path.parent, self.folder)


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.resolve().relative_to(folder.resolve())
        return True
    except (ValueError, OSError):
        return False


def check_outputs(
    outputs: Mapping[str, object],
    inputs: Mapping[str, Iterable] | None = None,
    *,
    folders: Mapping[str, object] | None = None,
) -> None:
    """Refuse outputs that would overwrite an input or each other.

    Parameters
    ----------
    outputs : mapping label -> path or OutputPattern
        Files to be written, labelled as the user named them (e.g. ``"--json"``).
        None values are skipped; an :class:`OutputPattern` stands for the files a
        job names as it goes (figures).
    inputs : mapping label -> iterable of paths, optional
        Files read by the job (e.g. ``{"--data": [...], "plant file": [...]}``); a
        workbook named with its sheet (``book.xlsx#Log``) stands for the workbook.
    folders : mapping label -> path, optional
        Output folders the job owns whole (a window store, ``figures/``): an input
        inside one is refused too, and so is a folder that is a file.

    Raises
    ------
    PerftestError
        Naming the two options and the path.
    """
    patterns = [(label, p) for label, p in outputs.items() if isinstance(p, OutputPattern)]
    outs = [
        (label, Path(p))
        for label, p in outputs.items()
        if p is not None and not isinstance(p, OutputPattern)
    ]
    from perftest.importers.sources import split_sheet

    # a run file "book.xlsx#Sheet" is read from book.xlsx: that is the input to protect
    ins = [
        (label, split_sheet(Path(p))[0]) for label, paths in (inputs or {}).items() for p in paths
    ]
    for p_label, pattern in patterns:
        folder = Path(pattern.folder)
        if folder.exists() and not folder.is_dir():
            raise PerftestError(
                f"{folder}: the output folder of {p_label} is a file. Move that file or "
                "choose another output folder.",
                file=folder,
            )
        for i_label, i_path in ins:
            if pattern.matches(i_path):
                raise PerftestError(
                    f"{i_path}: the output {p_label} is the input {i_label}; writing it "
                    "would destroy the input. Move the input or choose another output "
                    "folder.",
                    file=i_path,
                )
        for o_label, o_path in outs:
            if pattern.matches(o_path):
                raise PerftestError(
                    f"{o_path}: the outputs {o_label} and {p_label} are one file; one "
                    "would overwrite the other. Give each its own file.",
                    file=o_path,
                )
    for o_label, o_path in outs:
        for i_label, i_path in ins:
            if same_file(o_path, i_path):
                raise PerftestError(
                    f"{o_path}: the output {o_label} is the input {i_label} {i_path}; writing "
                    "it would destroy the input. Choose another output file.",
                    file=o_path,
                )
    for k, (a_label, a_path) in enumerate(outs):
        for b_label, b_path in outs[k + 1 :]:
            if same_file(a_path, b_path):
                raise PerftestError(
                    f"{a_path}: the outputs {a_label} and {b_label} are one file; one would "
                    "overwrite the other. Give each its own file.",
                    file=a_path,
                )
    for f_label, folder in (folders or {}).items():
        if folder is None:
            continue
        folder = Path(folder)
        if folder.exists() and not folder.is_dir():
            raise PerftestError(
                f"{folder}: the output folder {f_label} is a file. Give a folder.", file=folder
            )
        for i_label, i_path in ins:
            if _inside(i_path, folder):
                raise PerftestError(
                    f"{i_path}: the input {i_label} lies in the output folder {folder} "
                    f"({f_label}), which the job rewrites. Move the input or choose another "
                    "output folder.",
                    file=i_path,
                )


def report_paths(
    out_dir=None, *, json_path=None, markdown_path=None, html_path=None, figures: bool = False
) -> dict:
    """The files ``perftest report`` writes, labelled by option, as
    :func:`perftest.report.write_reports` chooses them (an explicit file overrides
    the one ``out_dir`` would hold).

    With ``figures`` and a Markdown report, the figures beside it
    (``figures/<stem>.png``) are one :class:`OutputPattern` entry,
    ``"--out (figures/*.png)"`` (or ``"--markdown (figures/*.png)"``)."""
    paths = {"--json": json_path, "--markdown": markdown_path, "--html": html_path}
    md_label = "--markdown"
    if out_dir is not None:
        out_dir = Path(out_dir)
        for label, name in (("--json", "summary.json"), ("--markdown", "report.md"),
                            ("--html", "report.html")):  # fmt: skip
            if paths[label] is None:
                paths[f"--out ({name})"] = out_dir / name
                if label == "--markdown":
                    md_label = "--out"
    md = markdown_path if markdown_path is not None else paths.get("--out (report.md)")
    if figures and md is not None:
        paths[f"{md_label} (figures/*.png)"] = OutputPattern(Path(md).parent / "figures", "*.png")
    return {k: v for k, v in paths.items() if v is not None}
