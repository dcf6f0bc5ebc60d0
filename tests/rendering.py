"""The report's real parts, used as a user would: LaTeX compiled by pdflatex and the HTML page
rendered by headless Chromium (both from Debian's packages; `.ci/run` installs them).

Without the programs a test skips with the reason on a developer's machine, and fails in CI
(CI=true), so CI always checks them."""

import os
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest


def _need(program: str) -> str:
    path = shutil.which(program)
    if path is None:
        message = f"{program} is not installed (apt-get install texlive-latex-base texlive-latex-recommended chromium; .ci/run does)"
        if os.environ.get("CI"):
            pytest.fail(message)
        pytest.skip(message)
    return path


def compile_latex(table_tex: Path, workdir: Path) -> Path:
    """Compile a table file inside a minimal article (booktabs, longtable) with pdflatex; returns
    the PDF. Fails the test with the LaTeX error when it does not compile or a table is too wide
    for the page (an overfull box)."""
    pdflatex = _need("pdflatex")
    workdir.mkdir(parents=True, exist_ok=True)
    doc = workdir / "paper.tex"
    doc.write_text("\\documentclass{article}\n\\usepackage{booktabs,longtable}\n\\begin{document}\n\\input{" + table_tex.resolve().as_posix()
                   + "}\n\\end{document}\n")
    run = subprocess.run([pdflatex, "-interaction=nonstopmode", "-halt-on-error", doc.name], cwd=workdir,
                         capture_output=True, text=True, timeout=120)
    errors = [line for line in run.stdout.splitlines() if line.startswith("!") or line.startswith("Overfull")]
    assert run.returncode == 0 and not errors, "\n".join(errors) or run.stdout[-2000:]
    pdf = workdir / "paper.pdf"
    assert pdf.is_file() and pdf.read_bytes().startswith(b"%PDF")
    return pdf


def png_pixels(path: Path) -> np.ndarray:
    """Grey values in [0, 1] of a PNG (read by matplotlib's image reader)."""
    import matplotlib.image as mpimg

    img = mpimg.imread(path)
    return img[:, :, :3].mean(axis=2)


def open_page(html: Path, width: int = 1280):
    """The page loaded in headless Chromium in a ``width`` px window, driven over the DevTools
    protocol (:class:`topology.report.browser.Page`): ``with open_page(p) as page:``, then
    ``page.evaluate(js)`` and ``page.console_errors``."""
    from topology.report.browser import Page

    return Page(html.resolve().as_uri(), width=width, browser=_need("chromium"), timeout=120)
