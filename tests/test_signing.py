"""Signed manifests and the hash chain across bundles.

References: Ed25519 as specified in RFC 8032 (the test vector of §7.1 "TEST 1",
quoted from memory and confirmed by the ``cryptography`` package agreeing with
it); the chain is the project's own design (README, "Audit trail"),
so its checks are properties: a consistent rewrite of a bundle (file and both
manifests recomputed) must fail ``verify`` against the trusted key, and
removing, replacing, swapping or downgrading a past bundle must break the
chain at the link that depends on it.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import shutil
import stat
from pathlib import Path

import pytest

from sitrep import cli
from sitrep.deliver.archive import (
    MANIFEST_JSON,
    MANIFEST_SHA256,
    manifest_bytes,
    verify_bundle,
    write_bundle,
)
from sitrep.deliver.chain import verify_chain
from sitrep.deliver.signing import (
    PRIVATE_KEY_FILE,
    PUBLIC_KEY_FILE,
    SIGNATURE_FILE,
    Signer,
    check_signature,
    generate_keys,
    load_public_key,
    load_signer,
    signature_document,
)
from sitrep.errors import ConfigError, DeliveryError

JURISDICTION = "Province of Quillmarsh"
FILES = {"report.pdf": b"%PDF-1.7 invented", "results.csv": b"district_id,ili\n001,4\n"}


@pytest.fixture
def keys(tmp_path: Path) -> tuple[Signer, Path]:
    files = generate_keys(tmp_path / "keys")
    return load_signer(files.private), files.public


def _write(root: Path, week: str, signer: Signer | None, reissue: str | None = None) -> Path:
    return write_bundle(
        root,
        JURISDICTION,
        week,
        FILES,
        {"report_week": week},
        reissue_reason=reissue,
        signer=signer,
    ).path


def _rewrite(bundle: Path, name: str, data: bytes, *, drop_signature: bool = False) -> None:
    """What a person with write access would do: change a file, recompute both manifests."""
    for p in bundle.rglob("*"):
        p.chmod(0o644)
    (bundle / name).write_bytes(data)
    manifest = json.loads((bundle / MANIFEST_JSON).read_text())
    manifest["files"][name] = {"sha256": hashlib.sha256(data).hexdigest(), "size": len(data)}
    if drop_signature:
        manifest["signature"] = None
        (bundle / SIGNATURE_FILE).unlink()
    (bundle / MANIFEST_JSON).write_bytes(manifest_bytes(manifest))
    names = sorted(
        p.relative_to(bundle).as_posix()
        for p in bundle.rglob("*")
        if p.is_file() and p.name not in (MANIFEST_SHA256, SIGNATURE_FILE)
    )
    sums = "".join(f"{hashlib.sha256((bundle / n).read_bytes()).hexdigest()}  {n}\n" for n in names)
    (bundle / MANIFEST_SHA256).write_text(sums)


# --------------------------------------------------------------------------- the primitive


def test_ed25519_matches_the_rfc_8032_test_vector() -> None:
    # RFC 8032 §7.1, TEST 1 (empty message); values quoted from memory.
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    secret = bytes.fromhex("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
    key = Ed25519PrivateKey.from_private_bytes(secret)
    public = key.public_key().public_bytes(
        serialization.Encoding.Raw, serialization.PublicFormat.Raw
    )
    assert public.hex() == "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
    assert key.sign(b"").hex() == (
        "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701"
        "cf9b46bd25bf5f0595bbe24655141438e7a100b"
    )


# --------------------------------------------------------------------------- keys


def test_keys_init_writes_a_private_0600_and_a_public_key_and_never_overwrites(
    tmp_path: Path,
) -> None:
    files = generate_keys(tmp_path / "k")
    assert stat.S_IMODE(files.private.stat().st_mode) == 0o600
    assert stat.S_IMODE((tmp_path / "k").stat().st_mode) == 0o700
    assert load_public_key(files.public).fingerprint == files.fingerprint
    assert load_signer(files.private).public.fingerprint == files.fingerprint
    before = files.private.read_bytes()
    with pytest.raises(DeliveryError, match="never overwritten"):
        generate_keys(tmp_path / "k")
    assert files.private.read_bytes() == before


def test_cli_keys_init_prints_the_fingerprint_and_refuses_a_second_time(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert cli.main(["keys", "init", "--out", str(tmp_path / "k")]) == cli.EXIT_OK
    out = capsys.readouterr().out
    fp = load_public_key(tmp_path / "k" / PUBLIC_KEY_FILE).fingerprint
    assert f"fingerprint: {fp}" in out
    assert (tmp_path / "k" / PRIVATE_KEY_FILE).read_text() not in out
    assert cli.main(["keys", "init", "--out", str(tmp_path / "k")]) == cli.EXIT_DELIVERY


@pytest.mark.parametrize("case", ["missing", "readable", "garbage", "public", "rsa"])
def test_an_unusable_signing_key_is_a_named_configuration_error(tmp_path: Path, case: str) -> None:
    files = generate_keys(tmp_path / "k")
    path = files.private
    if case == "missing":
        path = tmp_path / "nowhere.pem"
    elif case == "readable":
        path.chmod(0o644)
    elif case == "garbage":
        path.write_bytes(b"not a key")
    elif case == "public":
        path.write_bytes(files.public.read_bytes())
    else:
        from cryptography.hazmat.primitives import serialization
        from cryptography.hazmat.primitives.asymmetric import rsa

        rsa_key = rsa.generate_private_key(public_exponent=65537, key_size=2048)
        path.write_bytes(
            rsa_key.private_bytes(
                serialization.Encoding.PEM,
                serialization.PrivateFormat.PKCS8,
                serialization.NoEncryption(),
            )
        )
    expected = {
        "missing": "not found",
        "readable": "chmod 600",
        "garbage": "not a PEM private",
        "public": "not a PEM private",
        "rsa": "not an Ed25519",
    }[case]
    with pytest.raises(ConfigError, match=expected) as info:
        load_signer(path)
    assert str(path) in str(info.value)


# --------------------------------------------------------------------------- one bundle


def test_a_signed_bundle_verifies_against_its_key_and_only_that_key(
    tmp_path: Path, keys: tuple[Signer, Path]
) -> None:
    signer, public = keys
    bundle = _write(tmp_path / "a", "2026-W47", signer)
    assert (bundle / SIGNATURE_FILE).is_file()
    trusted = verify_bundle(bundle, (load_public_key(public),))
    assert trusted.ok and trusted.signature == "valid"
    assert trusted.signed_by == signer.public.fingerprint
    assert verify_bundle(bundle).signature == "valid-untrusted" and verify_bundle(bundle).ok
    stranger = load_signer(generate_keys(tmp_path / "other").private)
    wrong = verify_bundle(bundle, (stranger.public,))
    assert not wrong.ok and wrong.signature == "untrusted-key"


def test_a_consistent_rewrite_fails_verify_against_the_trusted_key(
    tmp_path: Path, keys: tuple[Signer, Path]
) -> None:
    signer, public = keys
    trusted = (load_public_key(public),)
    bundle = _write(tmp_path / "a", "2026-W47", signer)
    _rewrite(bundle, "results.csv", b"district_id,ili\n001,40\n")
    # without the signature the checksums alone are fooled: this is what signing adds
    result = verify_bundle(bundle, trusted)
    assert result.missing == () and result.changed == ()
    assert not result.ok and result.signature == "invalid"
    assert any("SHA-256" in p for p in result.problems)


def test_a_rewrite_that_removes_the_signature_fails_when_a_key_is_trusted(
    tmp_path: Path, keys: tuple[Signer, Path]
) -> None:
    signer, public = keys
    bundle = _write(tmp_path / "a", "2026-W47", signer)
    _rewrite(bundle, "results.csv", b"district_id,ili\n001,40\n", drop_signature=True)
    result = verify_bundle(bundle, (load_public_key(public),))
    assert not result.ok and result.signature == "unsigned"


def test_a_rewrite_re_signed_with_another_key_is_not_trusted(
    tmp_path: Path, keys: tuple[Signer, Path]
) -> None:
    signer, public = keys
    bundle = _write(tmp_path / "a", "2026-W47", signer)
    forger = load_signer(generate_keys(tmp_path / "forger").private)
    _rewrite(bundle, "results.csv", b"district_id,ili\n001,40\n")
    manifest = json.loads((bundle / MANIFEST_JSON).read_text())
    manifest["signature"]["fingerprint"] = forger.public.fingerprint
    (bundle / MANIFEST_JSON).write_bytes(manifest_bytes(manifest))
    _rewrite(bundle, "results.csv", b"district_id,ili\n001,40\n")  # recompute the sums again
    (bundle / SIGNATURE_FILE).write_bytes(
        signature_document(
            forger, "2026-W47/v1", (bundle / MANIFEST_SHA256).read_bytes(), dt.datetime.now(dt.UTC)
        )
    )
    assert verify_bundle(bundle).ok  # self-consistent ...
    result = verify_bundle(bundle, (load_public_key(public),))
    assert not result.ok and result.signature == "untrusted-key"  # ... but not by the trusted key


def test_a_signature_moved_to_another_bundle_does_not_verify(
    tmp_path: Path, keys: tuple[Signer, Path]
) -> None:
    signer, _ = keys
    first = _write(tmp_path / "a", "2026-W46", signer)
    document = (first / SIGNATURE_FILE).read_bytes()
    check = check_signature(document, (first / MANIFEST_SHA256).read_bytes(), "2026-W47/v1")
    assert check.status == "invalid" and "made for bundle 2026-W46/v1" in check.problems[0]
    tampered = json.loads(document)
    tampered["signed_at"] = "2020-01-01T00:00:00Z"
    check = check_signature(
        json.dumps(tampered).encode(), (first / MANIFEST_SHA256).read_bytes(), "2026-W46/v1"
    )
    assert check.status == "invalid" and "does not match" in check.problems[0]


def test_an_unsigned_build_says_so_and_still_verifies(tmp_path: Path) -> None:
    bundle = _write(tmp_path / "a", "2026-W47", None)
    result = verify_bundle(bundle)
    assert result.ok and result.signature == "unsigned"
    assert not (bundle / SIGNATURE_FILE).exists()
    assert json.loads((bundle / MANIFEST_JSON).read_text())["signature"] is None


def test_no_unsigned_bundle_after_a_signed_one(tmp_path: Path, keys: tuple[Signer, Path]) -> None:
    signer, _ = keys
    _write(tmp_path / "a", "2026-W46", signer)
    with pytest.raises(DeliveryError, match="unsigned bundle after a signed one"):
        _write(tmp_path / "a", "2026-W47", None)
    assert not (tmp_path / "a" / "province-of-quillmarsh" / "2026-W47").exists()


def test_the_pipeline_refuses_a_build_without_the_key_once_a_bundle_is_signed(
    tmp_path: Path, keys: tuple[Signer, Path], monkeypatch: pytest.MonkeyPatch
) -> None:
    from sitrep.config import config_from_dict
    from sitrep.pipeline import _signer

    signer, _ = keys
    _write(tmp_path / "a", "2026-W46", signer)
    monkeypatch.delenv("SITREP_SIGNING_KEY", raising=False)
    config = config_from_dict(
        {
            "report": {"jurisdiction": JURISDICTION},
            "output": {"archive": str(tmp_path / "a")},
        }
    )
    with pytest.raises(ConfigError, match="no signing key is configured"):
        _signer(config)
    monkeypatch.setenv("SITREP_SIGNING_KEY", str(signer.public.source))
    assert _signer(config) is not None and _signer(config).public == signer.public  # type: ignore[union-attr]


# --------------------------------------------------------------------------- the chain


def _archive_of_four(root: Path, signer: Signer | None) -> Path:
    for week in ("2026-W44", "2026-W45", "2026-W46"):
        _write(root, week, signer)
    _write(root, "2026-W45", signer, reissue="corrected counts")  # link 4 is a reissue
    return root / "province-of-quillmarsh"


def test_a_chain_of_weeks_and_a_reissue_verifies(tmp_path: Path, keys: tuple[Signer, Path]) -> None:
    signer, public = keys
    folder = _archive_of_four(tmp_path / "a", signer)
    report = verify_chain(folder, (load_public_key(public),))
    assert report.ok, report.first_break
    assert [
        (r.bundle_id, r.sequence) for r in sorted(report.links, key=lambda r: r.sequence or 0)
    ] == [("2026-W44/v1", 1), ("2026-W45/v1", 2), ("2026-W46/v1", 3), ("2026-W45/v2", 4)]
    assert report.head is not None and report.head.bundle_id == "2026-W45/v2"


def test_deleting_a_past_bundle_breaks_the_next_link(tmp_path: Path) -> None:
    folder = _archive_of_four(tmp_path / "a", None)
    shutil.rmtree(folder / "2026-W45" / "v1")
    report = verify_chain(folder)
    assert not report.ok
    assert report.first_break is not None and report.first_break.startswith("2026-W46/v1")
    assert "missing" in report.first_break


def test_replacing_a_past_bundle_breaks_the_next_link(tmp_path: Path) -> None:
    folder = _archive_of_four(tmp_path / "a", None)
    _rewrite(folder / "2026-W44" / "v1", "results.csv", b"district_id,ili\n001,40\n")
    assert verify_bundle(folder / "2026-W44" / "v1").ok  # on its own the rewrite passes
    report = verify_chain(folder)
    assert not report.ok and report.first_break is not None
    assert report.first_break.startswith("2026-W45/v1") and "replaced" in report.first_break


def test_swapping_two_bundles_breaks_the_chain(tmp_path: Path) -> None:
    folder = _archive_of_four(tmp_path / "a", None)
    os.rename(folder / "2026-W44", folder / "tmp")
    os.rename(folder / "2026-W46", folder / "2026-W44")
    os.rename(folder / "tmp", folder / "2026-W46")
    report = verify_chain(folder)
    assert not report.ok
    assert any("sits in" in p for r in report.links for p in r.problems)


def test_an_unsigned_bundle_after_a_signed_one_breaks_the_chain(
    tmp_path: Path, keys: tuple[Signer, Path]
) -> None:
    signer, public = keys
    folder = _archive_of_four(tmp_path / "a", signer)
    _rewrite(folder / "2026-W45" / "v2", "results.csv", b"x\n", drop_signature=True)
    report = verify_chain(folder)  # even without a trusted key
    assert not report.ok and report.first_break is not None
    assert report.first_break.startswith("2026-W45/v2")


def test_rotation_keeps_old_bundles_valid(tmp_path: Path, keys: tuple[Signer, Path]) -> None:
    old, old_public = keys
    new_files = generate_keys(tmp_path / "new")
    new = load_signer(new_files.private)
    _write(tmp_path / "a", "2026-W45", old)
    _write(tmp_path / "a", "2026-W46", new)
    folder = tmp_path / "a" / "province-of-quillmarsh"
    both = (load_public_key(old_public), load_public_key(new_files.public))
    assert verify_chain(folder, both).ok
    only_new = verify_chain(folder, both[1:])
    assert not only_new.ok and only_new.first_break is not None
    assert only_new.first_break.startswith("2026-W45/v1")


def test_bundles_from_before_the_chain_are_reported_not_broken(tmp_path: Path) -> None:
    root = tmp_path / "a"
    legacy = _write(root, "2026-W44", None)
    manifest = json.loads((legacy / MANIFEST_JSON).read_text())
    for key in ("chain", "signature"):
        del manifest[key]
    for p in legacy.rglob("*"):
        p.chmod(0o644)
    (legacy / MANIFEST_JSON).write_bytes(manifest_bytes(manifest))
    _rewrite(legacy, "results.csv", FILES["results.csv"])  # recompute the checksum list
    assert verify_bundle(legacy).signature == "unsigned-before-chain"
    _write(root, "2026-W45", None)
    report = verify_chain(root / "province-of-quillmarsh")
    assert report.ok, report.first_break
    statuses = {r.bundle_id: (r.status, r.sequence) for r in report.links}
    assert statuses == {"2026-W44/v1": ("before-chain", None), "2026-W45/v1": ("ok", 1)}


def test_cli_verify_chain_names_the_break(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = _archive_of_four(tmp_path / "a", None)
    assert cli.main(["verify", "--chain", str(folder)]) == cli.EXIT_OK
    assert "OK: 4 bundle(s)" in capsys.readouterr().out
    shutil.rmtree(folder / "2026-W45" / "v1")
    assert cli.main(["verify", "--chain", str(folder)]) == cli.EXIT_BLOCKED
    out = capsys.readouterr().out
    assert "FAILED: first break at 2026-W46/v1" in out


# --------------------------------------------------------------------------- end to end


@pytest.mark.slow
def test_the_private_key_never_reaches_a_bundle_a_log_or_an_output(
    tmp_path: Path, capfd: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    from cryptography.hazmat.primitives import serialization

    files = generate_keys(tmp_path / "keys")
    signer = load_signer(files.private)
    monkeypatch.setenv("SITREP_SIGNING_KEY", str(files.private))
    assert cli.main(["demo", "--out", str(tmp_path / "demo")]) == cli.EXIT_OK
    logged = capfd.readouterr()
    pem = files.private.read_bytes()
    raw = signer._key.private_bytes(
        serialization.Encoding.Raw, serialization.PrivateFormat.Raw, serialization.NoEncryption()
    )
    secrets = [pem, raw, pem.split(b"\n")[1]]
    written = [p for p in (tmp_path / "demo").rglob("*") if p.is_file()]
    assert any(p.name == SIGNATURE_FILE for p in written)
    for p in written:
        data = p.read_bytes()
        assert not any(s in data for s in secrets), p
    for text in (logged.out, logged.err):
        assert not any(s.decode("latin-1") in text for s in secrets)
    [bundle] = [p.parent for p in written if p.name == SIGNATURE_FILE]
    assert verify_bundle(bundle, (load_public_key(files.public),)).signature == "valid"
