"""The command line on bad scenario files (issue 11 item 4) and on an initial mix (item 1): a clean
message with the file name and exit code 2, never a traceback; ``check`` describes the mix."""

from __future__ import annotations

import io

from sim.cli.commands import main
from sim.io.demo import DEMOS, SCENARIO_DIR

LANTHIC = (SCENARIO_DIR / DEMOS["lanthic"]).read_text(encoding="utf-8")


def _run(args: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    return main(args, out=out), out.getvalue()


def test_a_file_that_is_not_utf8_exits_2_with_the_file_name(tmp_path, capsys):
    bad = tmp_path / "latin1.toml"
    bad.write_bytes(LANTHIC.encode("utf-8").replace(b"Standard care", b"Soins habituels \xe9"))  # latin-1 e-acute
    for verb in ("check", "run"):
        code, _ = _run([verb, str(bad), "--output", str(tmp_path / "out")] if verb == "run" else [verb, str(bad)])
        err = capsys.readouterr().err
        assert code == 2, err
        assert "latin1.toml" in err and "not UTF-8 text" in err and "Traceback" not in err
    assert not (tmp_path / "out").exists()


def test_a_description_that_is_nan_is_a_type_error(tmp_path, capsys):
    bad = tmp_path / "nan.toml"
    bad.write_text(LANTHIC.replace('description = "', 'description = nan\nnote = "', 1), encoding="utf-8")
    code, _ = _run(["check", str(bad)])
    err = capsys.readouterr().err
    assert code == 2
    assert "nan.toml:" in err and "description: must be a string, got nan" in err


def test_check_describes_an_initial_mix(tmp_path):
    path = tmp_path / "mix.toml"
    path.write_text(LANTHIC.replace('initial_state = "well"', 'initial_state = { well = 0.8, lanthic = 0.2 }'),
                    encoding="utf-8")
    code, text = _run(["check", str(path)])
    assert code == 0, text
    assert "Population: start in a mix (well 80%, lanthic 20%)" in text
    path.write_text(LANTHIC.replace('initial_state = "well"', 'initial_state = { female = { well = 1.0 }, '
                                                              'male = { well = 0.5, lanthic = 0.5 } }'),
                    encoding="utf-8")
    code, text = _run(["check", str(path)])
    assert code == 0, text
    assert "start in a mix by sex (female: well 100%; male: well 50%, lanthic 50%)" in text
