"""CI: open a report in headless Chromium; fail on a console error, a page error or a request."""

import sys

from playwright.sync_api import sync_playwright

ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--no-first-run"]


def main(path: str) -> int:
    problems = []
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path="/usr/bin/chromium", args=ARGS)
        page = browser.new_page()
        page.on("console", lambda m: problems.append(f"console {m.type}: {m.text}") if m.type == "error" else None)
        page.on("pageerror", lambda e: problems.append(f"page error: {e}"))
        page.on("request", lambda r: problems.append(f"request: {r.url}") if not r.url.startswith(("file:", "data:")) else None)
        page.goto("file://" + path)
        page.wait_for_load_state("load")
        articles = page.locator("article").count()
        browser.close()
    for p in problems:
        print(f"CI: {path}: {p}", file=sys.stderr)
    if not articles:
        print(f"CI: {path}: no page of the report was shown", file=sys.stderr)
        return 1
    print(f"CI: report opened in Chromium: {articles} pages, no console errors")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1]))
