"""A small Markdown report: headings, paragraphs, tables and figures in one folder."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from pathlib import Path

import pandas as pd


def markdown_table(frame: pd.DataFrame,
                   formats: Mapping[str, str | Callable[[object], str]] | None = None) -> str:
    """A DataFrame as a Markdown table (no extra dependency).

    Parameters
    ----------
    frame : pandas.DataFrame
    formats : mapping, optional
        Per column, a format spec (``"{:.3f}"``) or a function to text;
        other columns use ``str``.

    Examples
    --------
    >>> import pandas as pd
    >>> print(markdown_table(pd.DataFrame({"a": [1.23456], "b": ["x"]}), {"a": "{:.2f}"}))
    | a | b |
    |---:|:---|
    | 1.23 | x |
    """
    formats = dict(formats or {})

    def shown(column: str, value: object) -> str:
        rule = formats.get(column)
        if rule is None:
            return str(value)
        return rule(value) if callable(rule) else rule.format(value)

    numeric = [pd.api.types.is_numeric_dtype(frame[c]) for c in frame.columns]
    lines = ["| " + " | ".join(str(c) for c in frame.columns) + " |",
             "|" + "|".join("---:" if n else ":---" for n in numeric) + "|"]
    for row in frame.itertuples(index=False):
        cells = [shown(c, v).replace("|", "/") for c, v in zip(frame.columns, row)]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


class Report:
    """Collects Markdown blocks and figures, then writes ``report.md`` into ``folder``.

    Parameters
    ----------
    folder : str or Path
        Where the report and its PNG figures go (created if needed).
    title : str
        The report's first heading.
    """

    def __init__(self, folder: str | Path, title: str) -> None:
        self.folder = Path(folder)
        self.folder.mkdir(parents=True, exist_ok=True)
        self.blocks: list[str] = [f"# {title}"]

    def heading(self, text: str) -> None:
        """A second-level heading."""
        self.blocks.append(f"## {text}")

    def text(self, text: str) -> None:
        """A paragraph (or any Markdown)."""
        self.blocks.append(text)

    def table(self, frame: pd.DataFrame,
              formats: Mapping[str, str | Callable[[object], str]] | None = None) -> None:
        """A table (see :func:`markdown_table`)."""
        self.blocks.append(markdown_table(frame, formats))

    def figure(self, figure, name: str, caption: str) -> Path:
        """Save a matplotlib figure as ``name`` (PNG) and show it in the report."""
        import matplotlib.pyplot as plt

        path = self.folder / name
        figure.savefig(path, dpi=110)
        plt.close(figure)
        self.blocks.append(f"![{caption}]({name})\n\n*{caption}*")
        return path

    def write(self) -> Path:
        """Write ``report.md`` and return its path."""
        path = self.folder / "report.md"
        path.write_text("\n\n".join(self.blocks) + "\n", encoding="utf-8")
        return path
