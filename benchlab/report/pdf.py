"""The report as a PDF through matplotlib's PDF backend: a title page, then one page per captioned figure."""

from __future__ import annotations

import os
import textwrap
from pathlib import Path
from typing import Sequence

from matplotlib.backends.backend_pdf import PdfPages
from matplotlib.figure import Figure

from benchlab.errors import InputError
from benchlab.report.part_figures import new_figure, plain_text


def write_pdf(path: str | os.PathLike, title: str, lines: Sequence[str],
              items: Sequence[tuple[Figure | None, str]]) -> Path:
    """Write ``path`` (atomically): ``title`` and ``lines`` on the first page, each figure with its caption after.

    Raises
    ------
    InputError
        When the file cannot be written.
    """
    target = Path(path)
    tmp = target.with_name(target.name + ".tmp")
    try:
        with PdfPages(tmp) as pdf:
            cover = new_figure(8.27, 11.69)  # A4 portrait
            text = "\n\n".join("\n".join(textwrap.wrap(line, 90)) for line in lines)
            cover.text(0.08, 0.92, title, fontsize=14, weight="bold", va="top")
            cover.text(0.08, 0.86, text, fontsize=9, va="top")
            pdf.savefig(plain_text(cover))
            for number, (fig, caption) in enumerate(items, start=1):
                if fig is None:
                    continue
                fig.subplots_adjust(bottom=0.22)
                fig.text(0.02, 0.02, "\n".join(textwrap.wrap(f"Figure {number}. {caption}", 120)), fontsize=7,
                         va="bottom")
                pdf.savefig(plain_text(fig))
        os.replace(tmp, target)
    except OSError as exc:
        raise InputError(f"cannot write: {exc.strerror or exc}", path=str(target)) from exc
    return target
