"""Each HTML document printed to PDF by a real headless browser (Debian's chromium; poppler reads it back).

.ci/run installs chromium and poppler-utils when they are missing, so this test runs everywhere the
suite runs; it is never skipped.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from report_study import BP_LABEL, MEMBER_ID_VALUE, SECRET_LEVEL, build_in_store  # noqa: E402
from studylog import report  # noqa: E402
from studylog.store.session import locate, transaction  # noqa: E402

BROWSER_FLAGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--no-pdf-header-footer",
]


def _tool(name: str) -> str:
    found = shutil.which(name)
    assert found, f"{name} is not installed (.ci/run installs chromium and poppler-utils)"
    return found


def test_every_html_document_prints_with_the_variables_in_it(study: Path, tmp_path: Path) -> None:
    browser, pdfinfo, pdftotext = _tool("chromium"), _tool("pdfinfo"), _tool("pdftotext")
    build_in_store()
    jobs = {}
    with transaction(locate(), write=False) as session:
        for document in report.DOCUMENTS:
            html = tmp_path / f"{document}.html"
            html.write_text(report.render(session, document, fmt="html"), encoding="utf-8")
            pdf = tmp_path / f"{document}.pdf"
            profile = tmp_path / f"profile-{document}"
            command = [browser, *BROWSER_FLAGS, f"--user-data-dir={profile}", f"--print-to-pdf={pdf}",
                       html.as_uri()]
            # the documents print in parallel, each browser with its own profile folder
            jobs[document] = (pdf, subprocess.Popen(command, stdout=subprocess.DEVNULL,
                                                    stderr=subprocess.DEVNULL))
    pages: dict[str, int] = {}
    for document, (pdf, process) in jobs.items():
        assert process.wait(timeout=120) == 0, document
        info = subprocess.run([pdfinfo, str(pdf)], capture_output=True, text=True, check=True).stdout
        pages[document] = int(next(line.split()[-1] for line in info.splitlines()
                                   if line.startswith("Pages:")))
        text = subprocess.run([pdftotext, "-layout", str(pdf), "-"], capture_output=True, text=True,
                              check=True).stdout
        assert "systolic_bp" in text, document
        assert "apply them before you share this document" in " ".join(text.split()), document
        assert SECRET_LEVEL not in text and MEMBER_ID_VALUE not in text, document
        if document in ("dictionary", "writeup"):
            assert BP_LABEL in text, document
            assert "Table visits" in text and "<script>alert" in text.replace("\n", " ")
    # each table of the dictionary starts a page; the write-up holds every section, each from a new page
    assert 2 <= pages["dictionary"] <= 12
    assert pages["writeup"] >= pages["dictionary"] + 4
    assert all(1 <= pages[d] <= 6 for d in ("questions", "validity", "conclusions"))
