#!/usr/bin/env python3
"""Independent check of a tragus station signature with the `cryptography` package.

Reads the public key of KEY_ID out of a tragus keyring file (PyYAML), checks that KEY_ID is
the first 16 hex digits of the key's SHA-256, rebuilds the signed message from the form
the `tragus::keys` documentation states,

    b"tragus-signature-v1\\n" + PURPOSE + b"\\n" + HASH_HEX     (no trailing newline)

and verifies SIGNATURE_HEX over it with cryptography's Ed25519PublicKey (RFC 8032).
Nothing here imports or runs tragus.

Run:
    ed25519_check.py KEYRING KEY_ID PURPOSE HASH_HEX SIGNATURE_HEX
        prints `ok` and exits 0 when the signature verifies, prints `bad signature` and
        exits 1 when it does not, exits 2 on bad input (no such key, a wrong key id)
    ed25519_check.py --self-test
        signs and verifies RFC 8032 section 7.1 TEST 1-3 with cryptography (the library
        itself, on the published vectors); exit 0 when all match

tests/it/keys.rs runs the first form on keys made by `tragus keys new`; tests/run runs the
second. Exit code 3 means `cryptography` is not installed in this interpreter.
"""
import hashlib
import sys

try:
    from cryptography.exceptions import InvalidSignature
    from cryptography.hazmat.primitives.asymmetric.ed25519 import (
        Ed25519PrivateKey,
        Ed25519PublicKey,
    )
    from cryptography.hazmat.primitives.serialization import Encoding, PublicFormat
except ImportError as e:  # a reference environment made before cryptography was pinned
    print(f"cryptography is not installed: {e}", file=sys.stderr)
    sys.exit(3)

HEADER = b"tragus-signature-v1\n"

# RFC 8032 section 7.1, TEST 1, TEST 2, TEST 3: (secret key, public key, message, signature).
RFC8032_7_1 = [
    (
        "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60",
        "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a",
        "",
        "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bac"
        "c61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b",
    ),
    (
        "4ccd089b28ff96da9db6c346ec114e0f5b8a319f35aba624da8cf6ed4fb8a6fb",
        "3d4017c3e843895a92b70aa74d1b7ebc9c982ccf2ec4968cc0cd55f12af4660c",
        "72",
        "92a009a9f0d4cab8720e820b5f642540a2b27b5416503f8fb3762223ebdb69da085ac1e43e15996e"
        "458f3613d0f11d8c387b2eaeb4302aeeb00d291612bb0c00",
    ),
    (
        "c5aa8df43f9f837bedb7442f31dcb7b166d38535076f094b85ce3a2e0b4458f7",
        "fc51cd8e6218a1a38da47ed00230f0580816ed13ba3303ac5deb911548908025",
        "af82",
        "6291d657deec24024827e69c3abe01a30ce548a284743a445e3680d7db5ac3ac18ff9b538d16f290"
        "ae67f760984dc6594a7c15e9716ed28dc027beceea1ec40a",
    ),
]


def self_test():
    for i, (secret, public, message, signature) in enumerate(RFC8032_7_1, start=1):
        sk = Ed25519PrivateKey.from_private_bytes(bytes.fromhex(secret))
        pk = sk.public_key().public_bytes(Encoding.Raw, PublicFormat.Raw)
        sig = sk.sign(bytes.fromhex(message))
        if pk.hex() != public or sig.hex() != signature:
            print(f"RFC 8032 7.1 TEST {i}: cryptography disagrees", file=sys.stderr)
            return 1
        Ed25519PublicKey.from_public_bytes(pk).verify(sig, bytes.fromhex(message))
    print("RFC 8032 section 7.1 TEST 1-3: ok")
    return 0


def public_key_of(keyring_path, key_id):
    import yaml  # PyYAML, pinned beside cryptography

    with open(keyring_path, encoding="utf-8") as f:
        ring = yaml.safe_load(f)
    if ring.get("keyring") != "tragus-keyring/1":
        raise ValueError(f"{keyring_path}: not a tragus-keyring/1 file")
    for entry in ring.get("keys") or []:
        if str(entry["key_id"]) == key_id:
            public = bytes.fromhex(str(entry["public_key"]))
            if hashlib.sha256(public).hexdigest()[:16] != key_id:
                raise ValueError(f"key id {key_id} is not the id of its public key")
            return public
    raise ValueError(f"{keyring_path}: no key {key_id}")


def main(argv):
    if argv == ["--self-test"]:
        return self_test()
    if len(argv) != 5:
        print(__doc__, file=sys.stderr)
        return 2
    keyring_path, key_id, purpose, hash_hex, signature_hex = argv
    try:
        public = public_key_of(keyring_path, key_id)
        signature = bytes.fromhex(signature_hex)
    except (OSError, ValueError, KeyError) as e:
        print(e, file=sys.stderr)
        return 2
    message = HEADER + purpose.encode("utf-8") + b"\n" + hash_hex.encode("ascii")
    try:
        Ed25519PublicKey.from_public_bytes(public).verify(signature, message)
    except InvalidSignature:
        print("bad signature")
        return 1
    print("ok")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
