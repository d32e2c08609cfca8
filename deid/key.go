package deid

import (
	"bytes"
	"crypto/hmac"
	"crypto/rand"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"math/big"
	"os"
	"strings"
)

// EnvSiteKey is the environment variable that holds the site secret when
// no key file is given.
const EnvSiteKey = "VOXGAMMA_SITE_KEY"

// MinKeyBytes is the shortest site secret accepted (128 bits).
const MinKeyBytes = 16

// Key is the secret every pseudonym and remapped UID of a run is keyed
// with (HMAC-SHA-256, RFC 2104 with FIPS 180-4's SHA-256). Without it a
// pseudonym cannot be computed from a name or ID, so nobody can reverse a
// short ID by trying them all; with it the same value always gives the same
// pseudonym, so pseudonyms match across runs of one site.
type Key struct {
	secret []byte
	// Source says where the key came from: "--site-key FILE",
	// "VOXGAMMA_SITE_KEY", or "random (this run only)".
	Source string
	random bool
}

// LoadKey returns the site key: the content of file (trailing white space
// removed) when file is not empty, else the value of the environment
// variable VOXGAMMA_SITE_KEY (getenv), else a random key for this run. A
// key shorter than MinKeyBytes is an error naming where it came from.
func LoadKey(file string, getenv func(string) string) (*Key, error) {
	var secret []byte
	var source string
	switch {
	case file != "":
		data, err := os.ReadFile(file)
		if err != nil {
			return nil, fmt.Errorf("--site-key: %w", err)
		}
		secret, source = bytes.TrimRight(data, " \t\r\n"), "--site-key "+file
	case getenv != nil && getenv(EnvSiteKey) != "":
		secret, source = []byte(strings.TrimRight(getenv(EnvSiteKey), " \t\r\n")), EnvSiteKey
	default:
		return RandomKey(), nil
	}
	if len(secret) < MinKeyBytes {
		return nil, fmt.Errorf("%s: the site key is %d bytes; want at least %d (for example: head -c 32 /dev/urandom | base64 > site.key)", source, len(secret), MinKeyBytes)
	}
	return &Key{secret: secret, Source: source}, nil
}

// RandomKey returns a key of 32 random bytes for one run: its pseudonyms
// match no other run's.
func RandomKey() *Key {
	s := make([]byte, 32)
	if _, err := rand.Read(s); err != nil {
		panic(fmt.Sprintf("deid: no random key: %v", err)) // crypto/rand does not fail on Linux
	}
	return &Key{secret: s, Source: "random (this run only)", random: true}
}

// NewKey returns a key with the given secret (tests, and callers holding
// the secret already).
func NewKey(secret []byte, source string) *Key {
	return &Key{secret: append([]byte(nil), secret...), Source: source}
}

// Random reports whether the key was drawn for this run alone.
func (k *Key) Random() bool { return k.random }

func (k *Key) mac(kind, v string) []byte {
	m := hmac.New(sha256.New, k.secret)
	m.Write([]byte("voxgamma-deid/1\x00" + kind + "\x00" + v))
	return m.Sum(nil)
}

// ID names the key without revealing it, for a settings hash: "per-run"
// for a random key (so that a resumed run with another random key still
// matches), else "site:" and 16 hex digits of an HMAC of a fixed text.
func (k *Key) ID() string {
	if k.random {
		return "per-run"
	}
	return "site:" + hex.EncodeToString(k.mac("key-id", "")[:8])
}

// Note is what the result says about the key.
func (k *Key) Note() string {
	if k.random {
		return "pseudonyms and remapped UIDs are keyed with a random key drawn for this run: they will not match those of any other run (give --site-key FILE or set " + EnvSiteKey + " for pseudonyms that stay the same within your site)"
	}
	return "pseudonyms and remapped UIDs are keyed (HMAC-SHA-256) with the site key from " + k.Source + ": the same value gives the same pseudonym in every run with this key"
}

// normalise trims DICOM padding; a person name is also compared without
// case and trailing empty components ("Doe^Jane^^" is "DOE^JANE").
func normalise(kind, v string) string {
	v = strings.TrimSpace(strings.TrimRight(v, "\x00 "))
	if kind == KindName {
		v = strings.ToUpper(strings.TrimRight(v, "^="))
	}
	return v
}

// Pseudonym kinds.
const (
	// KindName is a person's name (PN).
	KindName = "name"
	// KindID is a patient ID.
	KindID = "id"
	// KindPath is a file or folder name.
	KindPath = "path"
	// KindFrame is a frame of reference UID (watch case keys).
	KindFrame = "frame"
)

// Pseudonym returns the keyed pseudonym of a value of a kind: "ANON-" and
// 16 upper-case hex digits (64 bits) of HMAC-SHA-256(key, kind, value).
// The empty value stays empty.
func (k *Key) Pseudonym(kind, v string) string {
	v = normalise(kind, v)
	if v == "" {
		return ""
	}
	return "ANON-" + strings.ToUpper(hex.EncodeToString(k.mac(kind, v)[:8]))
}

// Token returns 16 lower-case hex digits of the keyed HMAC of a value: a
// name for an output folder or a state entry that says nothing about the
// value.
func (k *Key) Token(kind, v string) string {
	return hex.EncodeToString(k.mac(kind, v)[:8])
}

// UID returns the UID that stands in for uid: "2.25." and the decimal of
// the first 128 bits of HMAC-SHA-256(key, uid) with the top bit cleared, a
// UUID-derived UID as PS3.5 B.2 lays out (at most 44 characters). The same
// UID always maps to the same one under one key, so files that shared a
// study or frame of reference still share it (PS3.15 E.1.1: replaced UIDs
// internally consistent). The empty UID stays empty.
func (k *Key) UID(uid string) string {
	uid = strings.TrimRight(uid, "\x00 ")
	if uid == "" {
		return ""
	}
	b := k.mac("uid", uid)[:16]
	b[0] &= 0x7f
	return "2.25." + new(big.Int).SetBytes(b).String()
}
