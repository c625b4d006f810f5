"""The first-run message: kernels absent from numba's cache folder are reported as compiling."""

from dustrt.cli import main
from dustrt.kernel_cache import KERNEL_MODULES, kernels_cached


def test_empty_cache_folder_means_not_compiled(tmp_path, monkeypatch):
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path))
    assert not kernels_cached()
    sub = tmp_path / "dustrt_abc"
    sub.mkdir()
    (sub / f"{KERNEL_MODULES[0]}.f-10.py311.nbi").write_bytes(b"")
    assert not kernels_cached()  # every kernel module must be there
    for m in KERNEL_MODULES[1:]:
        (sub / f"{m}.g-20.py311.nbi").write_bytes(b"")
    assert kernels_cached()


def test_cli_says_it_is_compiling_on_a_first_run(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("NUMBA_CACHE_DIR", str(tmp_path / "empty"))
    # (numba itself read its cache folder at import: nothing is recompiled here)
    scen = tmp_path / "s.toml"
    scen.write_text('[wavelengths]\nvalues_nm = [400.0, 500.0]\n[[population]]\nname = "a"\n'
                    'material = { n = 1.5 }\nsize = { distribution = "monodisperse", radius_um = 0.1 }\n')
    assert main(["optics", str(scen), "-o", str(tmp_path / "o.nc")]) == 0
    assert "first run: compiling" in capsys.readouterr().err
    bad = tmp_path / "bad.toml"
    bad.write_text("[wavelengths]\n")
    assert main(["optics", str(bad), "-o", str(tmp_path / "p.nc")]) == 2
    assert "first run" not in capsys.readouterr().err  # nothing to compile for a rejected scenario
