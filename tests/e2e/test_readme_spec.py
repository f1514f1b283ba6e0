"""The README's example spec passes `calibrate check` as printed, on the demo's tables."""

import re
from pathlib import Path

from click.testing import CliRunner

from calibrate.cli import main
from calibrate.data.demo import write_demo

README = Path(__file__).resolve().parents[2] / "README.md"


def test_readme_example_spec_passes_check(tmp_path):
    section = README.read_text().split("## The study spec", 1)[1]
    spec = re.search(r"```toml\n(.*?)```", section, flags=re.S).group(1)
    write_demo(tmp_path)
    (tmp_path / "readme.toml").write_text(spec)
    result = CliRunner().invoke(main, ["check", str(tmp_path / "readme.toml")])
    assert result.exit_code == 0, result.output
    assert "The data can be analysed." in result.output
