"""The compiled integrator never runs with stale machine code from numba's cache."""

from circlesim.base.compiled_cache import discard_stale_cache


def test_cache_is_discarded_when_a_dependency_changes(tmp_path):
    module = tmp_path / "fast.py"
    module.write_text("x = 1\n")
    dependency = tmp_path / "equations.py"
    dependency.write_text("a = 1\n")
    cache = tmp_path / "__pycache__"
    cache.mkdir()
    assert discard_stale_cache(str(module), [str(dependency)]) is False  # first stamp
    compiled = cache / "fast.integrate-1.py311.nbi"
    compiled.write_text("machine code")
    assert discard_stale_cache(str(module), [str(dependency)]) is False
    assert compiled.exists()
    dependency.write_text("a = 2\n")
    assert discard_stale_cache(str(module), [str(dependency)]) is True
    assert not compiled.exists()
