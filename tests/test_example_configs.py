"""The example configs: invented organisms, one plain header line, and they load."""

import re
from pathlib import Path

import pytest

from sim.config import load_config

CONFIGS = sorted(Path("configs").glob("*.toml"))


@pytest.mark.parametrize("path", CONFIGS, ids=[p.name for p in CONFIGS])
def test_one_plain_header_line(path):
    lines = path.read_text().splitlines()
    assert lines[0].startswith("# ") and "invented" in lines[0]
    assert lines[1] == "" and lines[2] == "[experiment]", "no narrative prose under the header"
    assert not any(line.startswith("#") for line in lines[1:]), "comments beyond the header line"
    load_config(path)


def test_no_real_organism_named():
    # The example once named a real shore snail (a periwinkle); examples name invented organisms.
    text = " ".join(p.read_text().lower() for p in CONFIGS) + " ".join(p.name for p in CONFIGS)
    assert "periwinkle" not in text and "snail" not in text
    assert Path("sim/demo.toml").resolve() == Path("configs/demo.toml").resolve()


DOCS = [Path("README.md"), *sorted(Path("docs").glob("*.md"))]


def test_the_docs_name_only_configs_and_images_that_exist():
    # a renamed example left its old name (and figures) in the pages once
    for page in DOCS:
        text = page.read_text()
        for name in re.findall(r"configs/([\w.-]+\.toml)", text):
            assert (Path("configs") / name).exists(), f"{page} names configs/{name}"
        for name in re.findall(r"\(images/([\w.-]+\.png)\)", text):
            assert (Path("docs/images") / name).exists(), f"{page} shows images/{name}"
    assert not any("periwinkle" in p.name or "snail" in p.name for p in Path("docs/images").iterdir())
