"""The report page of a choice-only project: the build, its warnings and files, and a line
saying the market build is off (there is no share, market or instrument table to show)."""

from __future__ import annotations

import html
from typing import Any

from demandprep.context import BuildContext
from demandprep.export.dictionary import market_build_record


def choice_only_page(ctx: BuildContext, inputs: Any, style: str, csp: str) -> str:
    """A self-contained page (no scripts, no fetches) for a build without the market build."""
    title = html.escape(f"demandprep build {inputs.build_id}")
    reason = market_build_record(ctx.config).get("reason", "")
    warnings = "".join(f'<li class="warning">{html.escape(w)}</li>' for w in ctx.warnings)
    files = inputs.outputs.to_html(index=False, border=0, escape=True, na_rep="")
    body = "\n".join(
        [
            f"<h1>{title}</h1>",
            f'<p class="note">{html.escape(ctx.config.project.name)}, built {inputs.built_at}</p>',
            f"<p><strong>Market build: off</strong> ({html.escape(reason)}).</p>",
            f"<section>\n<h2>Warnings</h2>\n<ul>{warnings}</ul>\n</section>",
            f"<section>\n<h2>Files</h2>\n{files}\n</section>",
        ]
    )
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f'<meta http-equiv="Content-Security-Policy" content="{csp}">\n'
        f"<title>{title}</title>\n<style>{style}</style>\n</head>\n<body>\n"
        f"{body}\n</body>\n</html>\n"
    )
