"""docs/ is linked from the README and its pages' links and code references resolve."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PAGES = sorted((ROOT / "docs").glob("*.md"))


def test_readme_links_the_documentation_index():
    assert "(docs/README.md)" in (ROOT / "README.md").read_text(encoding="utf-8")


def test_index_links_every_page():
    index = (ROOT / "docs" / "README.md").read_text(encoding="utf-8")
    for page in PAGES:
        if page.name != "README.md":
            assert f"]({page.name})" in index, page.name


def test_relative_links_resolve():
    for page in [*PAGES, ROOT / "README.md", ROOT / "DEVELOPERS.md"]:
        for target in re.findall(r"\]\(([^)#]+)(?:#[^)]*)?\)", page.read_text(encoding="utf-8")):
            if "://" not in target:
                assert (page.parent / target).exists(), f"{page.name}: broken link {target}"


def test_code_and_tests_cite_existing_docs():
    # Code and tests refer to the reference by path (docs/NAME.md): every such path exists.
    cited = set()
    for source in [*(ROOT / "emucompile").rglob("*.py"), *(ROOT / "tests").glob("*.py"), *(ROOT / "tools").glob("*.py")]:
        cited |= set(re.findall(r"docs/[a-z0-9-]+\.md", source.read_text(encoding="utf-8")))
    assert cited, "no reference to docs/ found"
    for name in sorted(cited):
        assert (ROOT / name).is_file(), name


def test_no_reference_to_plans_outside_the_repository():
    # Numbered plan sections and an external design file mean nothing to a reader of the repository.
    pattern = re.compile(r"(?<![a-z])(contract|issue)[ _-]?[0-9]|DESIGN" + r"\.md", re.IGNORECASE)
    sources = [*(ROOT / "emucompile").rglob("*.py"), *(ROOT / "tests").rglob("*.py"), *(ROOT / "tools").glob("*.py"),
               *(ROOT / "docs").glob("*.md"), ROOT / "README.md", ROOT / "DEVELOPERS.md"]
    found = [f"{path.relative_to(ROOT)}:{number}: {line.strip()}" for path in sources
             for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1) if pattern.search(line)]
    assert not found, "cite the docs/ files instead:\n" + "\n".join(found)
