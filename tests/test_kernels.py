"""The compiled-kernel infrastructure (core/kernels): cache keys, the switch, the compile command.

Checks of fact, not physics: the cache folder must change whenever the package version changes
(so an upgrade never runs stale machine code), and the numpy path must be selectable by the
environment variable and by the setting.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest
from ndrigid.core import Settings, kernels


def test_cache_is_keyed_by_version() -> None:
    """A fake version gives another cache folder; the same version gives the same one."""
    assert kernels.cache_dir(version="0.1.0") == kernels.cache_dir(version="0.1.0")
    assert kernels.cache_dir(version="0.1.0") != kernels.cache_dir(version="0.2.0")
    assert "9.9.9" in kernels.cache_key(version="9.9.9")


def test_cache_root_follows_environment(monkeypatch: pytest.MonkeyPatch, tmp_path) -> None:
    monkeypatch.setenv(kernels.ENV_CACHE, str(tmp_path))
    assert kernels.cache_dir().parent == tmp_path


@pytest.mark.parametrize("value", ["numpy", "NumPy", "0", "off"])
def test_environment_switches_compiled_path_off(monkeypatch: pytest.MonkeyPatch, value: str) -> None:
    monkeypatch.setenv(kernels.ENV_SWITCH, value)
    assert not kernels.available()
    assert not kernels.use_compiled(Settings())


def test_setting_switches_compiled_path_off(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv(kernels.ENV_SWITCH, raising=False)
    assert not kernels.use_compiled(Settings(compiled=False))


def test_compiled_setting_must_be_bool() -> None:
    from ndrigid.core import InputTypeError

    with pytest.raises(InputTypeError, match="settings.compiled"):
        Settings(compiled="yes").validated()  # type: ignore[arg-type]


def test_compile_command_prints_cache_folder(tmp_path) -> None:
    env = {**os.environ, "NDRIGID_CACHE_DIR": str(tmp_path)}
    out = subprocess.run([sys.executable, "-m", "ndrigid.compile", "--where"], capture_output=True,
                         text=True, env=env, check=True)
    assert out.stdout.strip().startswith(str(tmp_path))


def test_compile_command_refuses_bad_dimension() -> None:
    out = subprocess.run([sys.executable, "-m", "ndrigid.compile", "--dim", "1"], capture_output=True,
                         text=True)
    assert out.returncode != 0 and "--dim" in out.stderr


def test_compile_command_fills_the_cache_in_parallel(tmp_path) -> None:
    """``--jobs 2`` compiles each dimension in a worker and leaves every family warm."""
    if not kernels.available():
        pytest.skip("numba is not available")
    env = {**os.environ, "NDRIGID_CACHE_DIR": str(tmp_path)}
    out = subprocess.run([sys.executable, "-m", "ndrigid.compile", "--dim", "2", "3", "--families", "solver",
                          "--jobs", "2"], capture_output=True, text=True, env=env, timeout=600)
    assert out.returncode == 0, out.stderr
    assert "2-D:" in out.stdout and "3-D:" in out.stdout and "FAILED" not in out.stdout
    folder = next(tmp_path.iterdir())
    assert (folder / "solver_n2.ok").exists() and (folder / "solver_n3.ok").exists()


def test_compile_command_refuses_bad_jobs() -> None:
    out = subprocess.run([sys.executable, "-m", "ndrigid.compile", "--jobs", "0"], capture_output=True,
                         text=True)
    assert out.returncode != 0 and "--jobs" in out.stderr
