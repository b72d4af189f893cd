"""Signed sign-off steps: OpenSSH SSHSIG signatures, checked here and by OpenSSH's own ssh-keygen.

External references: OpenSSH PROTOCOL.sshsig (the signature format) and ssh-keygen(1), sections
"-Y sign", "-Y verify" and ALLOWED SIGNERS (the allowed-signers format). Every signature below is
also given to ``ssh-keygen -Y verify`` and its verdict must agree with ours. Keys are made in the test.
"""

from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import pytest

from kernels_helpers.errors import ShearbookError
from kernels_helpers.signatures import (
    NAMESPACE,
    Digests,
    StepSignature,
    check_step,
    fingerprint,
    read_allowed_signers,
    sign_message,
    signed_message,
)

SSH_KEYGEN = shutil.which("ssh-keygen")
pytestmark = pytest.mark.skipif(SSH_KEYGEN is None, reason="OpenSSH's ssh-keygen is not installed")

STEP = {"state": "checked", "who": "B. Checker", "time_utc": "2026-12-02T10:00:00Z", "note": "checked picks"}
DIGESTS = Digests(raw_files="a" * 64, interpretation="b" * 64, results="c" * 64)


def _key(folder: Path, name: str, kind: str = "ed25519") -> Path:
    key = folder / name
    extra = ["-b", "2048"] if kind == "rsa" else []
    subprocess.run([SSH_KEYGEN, "-q", "-t", kind, *extra, "-N", "", "-C", name, "-f", str(key)], check=True)
    return key


def _allowed(folder: Path, lines: list[str]) -> Path:
    path = folder / "allowed_signers"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _line(principal: str, key: Path, options: str = "") -> str:
    kind, b64 = key.with_suffix(".pub").read_text().split()[:2]
    return " ".join(x for x in (principal, options, kind, b64) if x)


def _openssh_verifies(allowed: Path, principal: str, signature: str, message: bytes, folder: Path) -> bool:
    sig = folder / "step.sig"
    sig.write_text(signature + "\n")
    done = subprocess.run([SSH_KEYGEN, "-Y", "verify", "-f", str(allowed), "-I", principal, "-n", NAMESPACE,
                           "-s", str(sig)], input=message, capture_output=True, check=False)
    return done.returncode == 0


def _signed(key: Path, principal: str, digests: Digests = DIGESTS, step: dict = STEP) -> dict:
    sshsig = sign_message(signed_message(step, principal, digests), key)
    return {**step, "signature": StepSignature(principal=principal, digests=digests, sshsig=sshsig)}


@pytest.fixture(scope="module")
def keys(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("keys")
    return {"checker": _key(folder, "checker"), "other": _key(folder, "other"), "folder": folder}


def test_a_signed_step_verifies_here_and_with_openssh(keys: dict[str, Path], tmp_path: Path) -> None:
    step = _signed(keys["checker"], "b.checker@fernholt.invented")
    allowed = _allowed(tmp_path, [_line("b.checker@fernholt.invented", keys["checker"])])
    check = check_step(step, DIGESTS, read_allowed_signers(allowed))
    assert check.status == "valid", check.text
    # the fingerprint is OpenSSH's own (ssh-keygen -l)
    listed = subprocess.run([SSH_KEYGEN, "-l", "-f", str(keys["checker"].with_suffix(".pub"))], capture_output=True,
                            text=True, check=True).stdout.split()[1]
    assert check.fingerprint == listed
    message = signed_message(step, "b.checker@fernholt.invented", DIGESTS)
    assert _openssh_verifies(allowed, "b.checker@fernholt.invented", step["signature"]["sshsig"], message, tmp_path)


def test_without_allowed_signers_the_signature_is_checked_but_the_signer_is_not(keys: dict[str, Path]) -> None:
    check = check_step(_signed(keys["checker"], "b.checker@fernholt.invented"), DIGESTS, None)
    assert check.status == "not checked" and "signature verifies with key SHA256:" in check.detail


def test_changed_content_names_what_changed(keys: dict[str, Path]) -> None:
    step = _signed(keys["checker"], "b.checker@fernholt.invented")
    now = Digests(raw_files="a" * 64, interpretation="b" * 64, results="d" * 64)  # a number moved
    check = check_step(step, now, None)
    assert check.status == "invalid" and check.detail.endswith("the results changed since the step was signed")


def test_an_edited_step_or_digest_breaks_the_signature_here_and_for_openssh(keys: dict[str, Path],
                                                                           tmp_path: Path) -> None:
    step = _signed(keys["checker"], "b.checker@fernholt.invented")
    allowed = _allowed(tmp_path, [_line("b.checker@fernholt.invented", keys["checker"])])
    for edit in ({"who": "A. Stranger"}, {"state": "approved"}, {"time_utc": "2026-12-03T10:00:00Z"}):
        forged = {**step, **edit}
        assert check_step(forged, DIGESTS, read_allowed_signers(allowed)).status == "invalid"
        message = signed_message(forged, "b.checker@fernholt.invented", DIGESTS)
        assert not _openssh_verifies(allowed, "b.checker@fernholt.invented", step["signature"]["sshsig"], message,
                                     tmp_path)
    forged_digests = {**step, "signature": {**step["signature"], "digests": {**DIGESTS, "results": "d" * 64}}}
    check = check_step(forged_digests, Digests(**{**DIGESTS, "results": "d" * 64}), None)
    assert check.status == "invalid" and "does not verify" in check.detail


def test_a_key_not_allowed_for_the_principal_is_an_unknown_key(keys: dict[str, Path], tmp_path: Path) -> None:
    step = _signed(keys["other"], "b.checker@fernholt.invented")  # someone else's key, claiming the checker's name
    allowed = read_allowed_signers(_allowed(tmp_path, [_line("b.checker@fernholt.invented", keys["checker"])]))
    check = check_step(step, DIGESTS, allowed)
    assert check.status == "unknown key" and "is not an allowed signer for b.checker@fernholt.invented" in check.detail
    # the right key listed for another principal only
    allowed = read_allowed_signers(_allowed(tmp_path, [_line("c.other@fernholt.invented", keys["other"])]))
    assert check_step(step, DIGESTS, allowed).status == "unknown key"


def test_allowed_signers_patterns_and_namespaces_follow_openssh(keys: dict[str, Path], tmp_path: Path) -> None:
    step = _signed(keys["checker"], "b.checker@fernholt.invented")
    lines = [
        "# reviewers of Fernholt (invented)",
        "",
        _line("*@fernholt.invented", keys["checker"], 'namespaces="shearbook-signoff,file"'),
    ]
    allowed = _allowed(tmp_path, lines)
    assert check_step(step, DIGESTS, read_allowed_signers(allowed)).status == "valid"
    message = signed_message(step, "b.checker@fernholt.invented", DIGESTS)
    assert _openssh_verifies(allowed, "b.checker@fernholt.invented", step["signature"]["sshsig"], message, tmp_path)
    other_ns = _allowed(tmp_path, [_line("*@fernholt.invented", keys["checker"], 'namespaces="git"')])
    assert check_step(step, DIGESTS, read_allowed_signers(other_ns)).status == "unknown key"
    assert not _openssh_verifies(other_ns, "b.checker@fernholt.invented", step["signature"]["sshsig"], message,
                                 tmp_path)


def test_a_signature_for_another_namespace_is_refused(keys: dict[str, Path], tmp_path: Path) -> None:
    message = signed_message(STEP, "b.checker@fernholt.invented", DIGESTS)
    done = subprocess.run([SSH_KEYGEN, "-Y", "sign", "-f", str(keys["checker"]), "-n", "git"], input=message,
                          capture_output=True, check=True)
    step = {**STEP, "signature": {"principal": "b.checker@fernholt.invented", "digests": DIGESTS,
                                  "sshsig": done.stdout.decode()}}
    check = check_step(step, DIGESTS, None)
    assert check.status == "invalid" and "namespace 'git'" in check.detail


def test_a_damaged_signature_is_invalid_in_words(keys: dict[str, Path]) -> None:
    step = _signed(keys["checker"], "b.checker@fernholt.invented")
    sshsig = step["signature"]["sshsig"]
    lines = sshsig.splitlines()
    for damaged, said in ((sshsig.replace("BEGIN SSH SIGNATURE", "BEGIN PGP SIGNATURE"), "not an armoured"),
                          ("\n".join([lines[0], lines[1][:-4] + "!!!!", *lines[2:]]), "base64 is damaged"),
                          ("\n".join([lines[0], "QUJD", lines[-1]]), "not an SSHSIG")):
        check = check_step({**step, "signature": {**step["signature"], "sshsig": damaged}}, DIGESTS, None)
        assert check.status == "invalid" and said in check.detail, check.detail


def test_an_rsa_key_is_refused_with_what_to_use(keys: dict[str, Path]) -> None:
    rsa = _key(keys["folder"], "rsa-key", "rsa")
    check = check_step(_signed(rsa, "b.checker@fernholt.invented"), DIGESTS, None)
    assert check.status == "invalid" and "Ed25519" in check.detail


def test_an_unsigned_step_is_said_so() -> None:
    assert check_step(STEP, DIGESTS, None).status == "unsigned"


def test_bad_allowed_signers_lines_are_named(tmp_path: Path, keys: dict[str, Path]) -> None:
    with pytest.raises(ShearbookError, match=r"allowed_signers, line 2: expected 'principals \[options\] key-type"):
        read_allowed_signers(_allowed(tmp_path, ["# ok", "b.checker@fernholt.invented"]))
    with pytest.raises(ShearbookError, match="line 1: cert-authority lines"):
        read_allowed_signers(_allowed(tmp_path, [_line("*", keys["checker"], "cert-authority")]))
    with pytest.raises(ShearbookError, match="allowed-signers file not found"):
        read_allowed_signers(tmp_path / "missing")


def test_signing_without_ssh_keygen_or_key_says_what_to_do(tmp_path: Path, keys: dict[str, Path]) -> None:
    with pytest.raises(ShearbookError, match="key file not found"):
        sign_message(b"x", tmp_path / "no-such-key")
    with pytest.raises(ShearbookError, match="ssh-keygen could not sign"):
        (tmp_path / "not-a-key").write_text("hello\n")
        sign_message(b"x", tmp_path / "not-a-key")


def test_fingerprint_is_openssh_s(keys: dict[str, Path]) -> None:
    import base64

    blob = base64.b64decode(keys["checker"].with_suffix(".pub").read_text().split()[1])
    listed = subprocess.run([SSH_KEYGEN, "-l", "-f", str(keys["checker"].with_suffix(".pub"))], capture_output=True,
                            text=True, check=True).stdout.split()[1]
    assert fingerprint(blob) == listed


# --- end to end: sign with the command, record, verify with an allowed-signers file --------------------------


@pytest.mark.notebook
@pytest.mark.slow
def test_signoff_record_and_verify_report_each_step_signed_or_not(example_copy: Path, keys: dict[str, Path],
                                                                  tmp_path: Path,
                                                                  capsys: pytest.CaptureFixture[str]) -> None:
    from kernels_helpers.cli import main
    from kernels_helpers.interpretation import load_interpretation
    from kernels_helpers.record import write_record

    assert main(["signoff", str(example_copy), "--state", "checked", "--who", "B. Checker",
                 "--sign", str(keys["checker"]), "--principal", "b.checker@fernholt.invented"]) == 0
    assert main(["signoff", str(example_copy), "--state", "approved", "--who", "C. Approver",
                 "--sign", str(keys["other"]), "--principal", "c.approver@fernholt.invented"]) == 0
    history = load_interpretation(example_copy / "interpretation.json").signoff.history
    assert [h["signature"]["principal"] for h in history[-2:]] == ["b.checker@fernholt.invented",
                                                                  "c.approver@fernholt.invented"]
    # then back to draft and checked again without a signature: one record serves the signed and unsigned steps
    assert main(["signoff", str(example_copy), "--state", "draft", "--who", "B. Checker"]) == 0
    assert main(["signoff", str(example_copy), "--state", "checked", "--who", "D. Checker"]) == 0
    record = write_record(example_copy, example_copy / "records" / "signed.html").path
    text = record.read_text(encoding="utf-8")
    assert text.count("<b>not checked</b>: signature verifies with key SHA256:") == 2
    both = _allowed(tmp_path, [_line("b.checker@fernholt.invented", keys["checker"]),
                               _line("c.approver@fernholt.invented", keys["other"])])
    capsys.readouterr()
    assert main(["verify", str(record), "--allowed-signers", str(both)]) == 0  # an unsigned step is not required
    out = capsys.readouterr().out
    assert "MATCH" in out and "sign-off (signatures ok):" in out
    assert out.count(": valid: signed by ") == 2
    assert "checked by D. Checker at " in out and ": unsigned: no signature" in out
    assert main(["verify", str(record), "--allowed-signers", str(both), "--require-signed"]) == 1  # unless asked
    out = capsys.readouterr().out
    assert "SIGNATURES FAIL" in out and "checked by D. Checker at " in out and ": unsigned: no signature" in out
    only_checker = _allowed(tmp_path, [_line("b.checker@fernholt.invented", keys["checker"])])
    assert main(["verify", str(record), "--allowed-signers", str(only_checker)]) == 1
    out = capsys.readouterr().out
    assert "MATCH" in out and "SIGNATURES FAIL" in out and "approved by C. Approver at " in out
    assert "unknown key: signature verifies, but key SHA256:" in out

    # the embedded interpretation edited after signing (a pick moved by hand): the signatures no longer hold
    interp = json.loads(text.split('id="shearbook-interpretation">', 1)[1].split("</script>", 1)[0])
    interp["settings"]["picks"]["cs_window_mm"] += 0.5  # the file's key (settings.FILE_KEYS)
    from kernels_helpers.escaping import json_for_script

    start = text.index('id="shearbook-interpretation">') + len('id="shearbook-interpretation">')
    end = text.index("</script>", start)
    record.write_text(text[:start] + json_for_script(interp, indent=2) + text[end:], encoding="utf-8")
    assert main(["verify", str(record), "--allowed-signers", str(both)]) == 1
    out = capsys.readouterr().out
    assert "invalid: the signed content differs from this record: the interpretation changed" in out


def test_signoff_options_are_checked_before_anything_is_written(example_copy: Path, keys: dict[str, Path],
                                                                capsys: pytest.CaptureFixture[str]) -> None:
    from kernels_helpers.cli import main

    before = (example_copy / "interpretation.json").read_bytes()
    assert main(["signoff", str(example_copy), "--state", "checked", "--who", "B. Checker",
                 "--sign", str(keys["checker"])]) == 2
    assert "--sign needs --principal" in capsys.readouterr().err
    assert main(["signoff", str(example_copy), "--state", "checked", "--who", "B. Checker",
                 "--principal", "b@x.invented"]) == 2
    assert "--principal names the signer of --sign KEY" in capsys.readouterr().err
    assert main(["signoff", str(example_copy), "--state", "draft", "--who", "B. Checker",
                 "--sign", str(keys["checker"]), "--principal", "b@x.invented"]) == 2
    assert "a step back to draft is not signed" in capsys.readouterr().err
    assert (example_copy / "interpretation.json").read_bytes() == before


def test_a_principal_edited_after_signing_breaks_the_signature(keys: dict[str, Path], tmp_path: Path) -> None:
    """A hostile editor renames the signer to another allowed principal holding the same key: still invalid."""
    step = _signed(keys["checker"], "b.checker@fernholt.invented")
    renamed = {**step, "signature": {**step["signature"], "principal": "c.approver@fernholt.invented"}}
    allowed = read_allowed_signers(_allowed(tmp_path, [_line("*@fernholt.invented", keys["checker"])]))
    check = check_step(renamed, DIGESTS, allowed)
    assert check.status == "invalid" and "does not verify" in check.detail
