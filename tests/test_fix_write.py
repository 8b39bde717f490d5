"""Writing: atomic, mode kept, refused when the file moved under us, nothing when nothing changed."""

from __future__ import annotations

import codecs
import os
import stat

import pytest

from cfgcheck import api, fix
from cfgcheck.fix import write as fix_write

TEXT = "# Saltmarsh Games: dialogue run\nlearning_rate: 2e-4   # text under YAML 1.1\nnum_train_epochs: 2\n"
FIXED = "# Saltmarsh Games: dialogue run\nlearning_rate: 2.0e-4 # text under YAML 1.1\nnum_train_epochs: 2\n"


@pytest.fixture
def config(tmp_path):
    p = tmp_path / "run.yaml"
    p.write_bytes(TEXT.encode())
    return p


def test_plain_write(config):
    result = fix.fix_file(config, api.make_options())
    assert result.written and config.read_bytes() == FIXED.encode()


@pytest.mark.parametrize("exc", [OSError(28, "No space left on device"), KeyboardInterrupt()])
def test_interrupted_between_temp_write_and_rename_leaves_original(config, monkeypatch, exc):
    seen = {}

    def crash(tmp, target):
        seen["tmp"] = tmp
        with open(tmp, "rb") as fh:  # the temp file was complete and synced before the rename
            seen["data"] = fh.read()
        raise exc

    monkeypatch.setattr(fix_write, "_rename", crash)
    if isinstance(exc, OSError):
        result = fix.fix_file(config, api.make_options())
        assert not result.written and "cannot write" in result.refused
        assert api.fix_exit_code(fix.FixReport([result])) == api.EXIT_INPUT
    else:
        with pytest.raises(KeyboardInterrupt):
            fix.fix_file(config, api.make_options())
    assert seen["data"] == FIXED.encode()
    assert config.read_bytes() == TEXT.encode()
    assert not os.path.exists(seen["tmp"])
    assert [p.name for p in config.parent.iterdir()] == ["run.yaml"]


def test_refuses_when_the_file_changed_since_read(config, monkeypatch):
    real = fix._fix_text  # what fix_files fixes each file with
    edited = "learning_rate: 3e-4\nnum_train_epochs: 2\n"

    def and_someone_saves(*a, **k):
        out = real(*a, **k)
        config.write_text(edited)  # an editor saves while we compute
        return out

    monkeypatch.setattr(fix, "_fix_text", and_someone_saves)
    result = fix.fix_file(config, api.make_options())
    assert not result.written and "changed on disk" in result.refused
    assert config.read_text() == edited


def test_nothing_written_when_nothing_changes(tmp_path):
    p = tmp_path / "clean.yaml"
    p.write_text("learning_rate: 2.0e-4\nnum_train_epochs: 2\n")
    before = p.stat()
    result = fix.fix_file(p, api.make_options())
    assert not result.changed and not result.written
    after = p.stat()
    assert (after.st_ino, after.st_mtime_ns) == (before.st_ino, before.st_mtime_ns)


def test_mode_and_symlink_kept(config):
    os.chmod(config, 0o604)
    link = config.parent / "link.yaml"
    link.symlink_to(config.name)
    result = fix.fix_file(link, api.make_options())
    assert result.written
    assert link.is_symlink() and config.read_bytes() == FIXED.encode()
    assert stat.S_IMODE(config.stat().st_mode) == 0o604


@pytest.mark.parametrize("encoding,bom", [("utf-16-le", codecs.BOM_UTF16_LE),
                                          ("utf-16-be", codecs.BOM_UTF16_BE),
                                          ("utf-8", codecs.BOM_UTF8)])
def test_encoding_and_bom_restored(tmp_path, encoding, bom):
    p = tmp_path / "wide.yaml"
    p.write_bytes(bom + TEXT.replace("\n", "\r\n").encode(encoding))
    assert fix.fix_file(p, api.make_options()).written
    assert p.read_bytes() == bom + FIXED.replace("\n", "\r\n").encode(encoding)


def test_unparsable_input_is_not_fixed_and_not_an_internal_error(tmp_path):
    p = tmp_path / "broken.yaml"
    p.write_text("learning_rate: 1e-4\n  bad: [\n")
    result = fix.fix_file(p, api.make_options())
    assert result.problem is not None and result.error is None and not result.written
    assert result.problem.line >= 1 and "invalid YAML" in result.problem.reason
    assert api.fix_exit_code(fix.FixReport([result])) == api.EXIT_INPUT


def test_missing_file_is_an_input_problem(tmp_path):
    result = fix.fix_file(tmp_path / "nope.yaml", api.make_options())
    assert result.problem is not None and "no such file" in result.problem.reason
