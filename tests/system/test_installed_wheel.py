"""The built wheel carries everything a container needs: installed into a fresh virtual
environment, it migrates a database from a neutral folder (the compose file's one-shot
`marginal schema apply`) and serves the interactive documentation's assets."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import sysconfig
import venv
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _run(*args: str | Path, cwd: Path, env: dict[str, str] | None = None) -> str:
    done = subprocess.run(
        [str(a) for a in args], cwd=cwd, env=env, capture_output=True, text=True, timeout=600
    )
    assert done.returncode == 0, done.stdout + done.stderr
    return done.stdout


def test_the_wheel_migrates_from_a_neutral_folder(tmp_path: Path) -> None:
    # Built from a clean copy of the sources: a build folder left in the checkout by an
    # earlier build would hide files the package configuration leaves out.
    source = tmp_path / "source"
    junk = shutil.ignore_patterns("__pycache__", "*.pyc")
    for name in ("models", "service"):
        shutil.copytree(ROOT / name, source / name, ignore=junk)
    for name in ("pyproject.toml", "README.md"):
        shutil.copy(ROOT / name, source / name)
    wheels = tmp_path / "wheels"
    _run(
        sys.executable, "-m", "pip", "wheel", "--no-deps",
        "-q", "-w", wheels, source, cwd=tmp_path,
    )  # fmt: skip
    [wheel] = wheels.glob("marginal-*.whl")

    fresh = tmp_path / "fresh"
    venv.create(fresh, with_pip=False)
    python = fresh / "bin" / "python"
    site = Path(
        _run(
            python, "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])", cwd=tmp_path
        ).strip()
    )
    # The dependencies come from the test environment (listed after the fresh site, and
    # without its .pth files, so the editable checkout of this project is not seen).
    (site / "dependencies.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    _run(
        sys.executable, "-m", "pip", "--python", python, "install", "--no-deps", "-q", wheel,
        cwd=tmp_path,
    )  # fmt: skip

    neutral = tmp_path / "elsewhere"
    neutral.mkdir()
    env = {
        k: v for k, v in os.environ.items() if not k.startswith("MARGINAL_") and k != "PYTHONPATH"
    }
    env["MARGINAL_DATABASE_URL"] = f"sqlite:///{neutral / 'shop.db'}"
    where = _run(python, "-c", "import service; print(service.__file__)", cwd=neutral, env=env)
    assert Path(where.strip()).is_relative_to(site), where  # the installed copy, not the checkout
    marginal = fresh / "bin" / "marginal"
    _run(marginal, "schema", "apply", cwd=neutral, env=env)
    steps = sorted((ROOT / "service" / "core" / "migrations" / "versions").glob("*.py"))
    latest = steps[-1].name.split("_")[1]
    assert _run(marginal, "schema", "show", cwd=neutral, env=env).strip() == latest
    assets = _run(
        python, "-c",
        "from importlib.resources import files; "
        "print((files('fastapi_offline') / 'static' / 'swagger-ui-bundle.js').is_file())",
        cwd=neutral, env=env,
    )  # fmt: skip
    assert assets.strip() == "True"
