"""`ctpore analyze --memory / --scheduler`: the chunked path from the command line."""

import json

from ctpore.cli import main
from ctpore.demo_scenario import make_piece
from ctpore.io.ome_tiff import write_ome_tiff


def test_scheduler_option_runs_the_chunked_path_with_the_in_memory_numbers(tmp_path, capsys):
    piece = make_piece(setting="intense", time_s=6.0, seed=3, shape=(40, 48, 48))
    stack = tmp_path / "p.ome.tif"
    write_ome_tiff(stack, piece.grey, piece.spacing_um)
    recipe = tmp_path / "r.toml"
    recipe.write_text("[structure]\nenabled = false\n", encoding="utf-8")
    outs = {}
    for name, extra in (("memory", []), ("chunked", ["--scheduler", "synchronous"])):
        code = main(["analyze", str(stack), "--recipe", str(recipe), "--out",
                     str(tmp_path / name), "--json", "--quiet", *extra])
        out, err = capsys.readouterr()
        assert code == 0, err
        outs[name] = json.loads(out)
    a, b = outs["memory"], outs["chunked"]
    assert "chunked" in b and "chunked" not in a
    for key in ("porosity_gas", "porosity_open", "porosity_closed", "envelope_volume_mm3"):
        assert a[key] == b[key], key
    assert (tmp_path / "chunked" / "report.html").is_file()


def test_bad_memory_text_exits_2_and_writes_nothing(tmp_path, capsys):
    stack = tmp_path / "p.ome.tif"
    piece = make_piece(setting="intense", time_s=6.0, seed=3, shape=(40, 48, 48))
    write_ome_tiff(stack, piece.grey, piece.spacing_um)
    code = main(["analyze", str(stack), "--out", str(tmp_path / "r"), "--memory", "12XB"])
    err = capsys.readouterr().err
    assert code == 2 and "--memory" in err and "Fix:" in err
    assert not (tmp_path / "r").exists()
