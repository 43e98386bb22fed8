"""The bundle's report opens in a real headless Chromium with no console
error and no network request (it must work offline)."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

from curation.bundle import BundleOptions, make_bundle
from curation.store import Store
from tests.bundle_helpers import build_store, first_tree

BROWSER_ENV = "TIPLEDGER_TEST_BROWSER"


def _browser() -> str:
    path = os.environ.get(BROWSER_ENV) or shutil.which("chromium") or "/usr/bin/chromium"
    if not Path(path).exists():
        pytest.skip(
            f"no Chromium at {path!r}: install Debian's chromium package (as .ci/run does) "
            f"or set ${BROWSER_ENV}"
        )
    return path


@pytest.mark.browser
def test_report_opens_offline_without_errors(store: Store, tmp_path: Path) -> None:
    from playwright.sync_api import sync_playwright

    executable = _browser()
    tree_set_id = build_store(store, tmp_path)
    folder = tmp_path / "bundle"
    make_bundle(
        store, folder, BundleOptions(tree_id=first_tree(store, tree_set_id), permutations=9)
    )
    report = (folder / "report.html").resolve()
    errors: list[str] = []
    requests: list[str] = []
    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(executable_path=executable, args=["--no-sandbox"])
        page = browser.new_page()
        page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
        page.on("pageerror", lambda e: errors.append(str(e)))
        page.on("request", lambda r: requests.append(r.url))
        page.goto(report.as_uri())
        page.wait_for_load_state("load")
        assert page.title() == "tipledger bundle report"
        heading = page.locator("h2").all_inner_texts()
        tip_marks = page.locator("svg circle title").count()
        page.screenshot(path=str(tmp_path / "report.png"), full_page=True)
        browser.close()
    assert errors == []
    assert requests == [report.as_uri()]
    assert {"Summary", "Tree", "Findings and what was done", "Phylogenetic diagnostics"} <= set(
        heading
    )
    assert tip_marks == 4  # one mark per tip of the bundle's tree
    assert (tmp_path / "report.png").stat().st_size > 10_000
