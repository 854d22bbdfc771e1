package password

import (
	"strings"
	"testing"
)

// The Argon2id test vector of the reference implementation (the Password
// Hashing Competition winner's src/test.c: t=2, m=2^16 KiB, p=1, password
// "password", salt "somesalt").
const referencePHC = "$argon2id$v=19$m=65536,t=2,p=1$c29tZXNhbHQ$CTFhFdXPJO1aFaMaO6Mm5c8y7cJHAph8ArZWb2GRPPc"

func TestReferenceVector(t *testing.T) {
	got := encode("password", []byte("somesalt"), Params{MemoryKiB: 65536, Time: 2, Threads: 1, KeyLen: 32})
	if got != referencePHC {
		t.Fatalf("encode = %s, want the reference implementation's %s", got, referencePHC)
	}
	for pw, want := range map[string]bool{"password": true, "passwore": false, "": false} {
		ok, err := Verify(pw, referencePHC)
		if err != nil || ok != want {
			t.Errorf("Verify(%q) = %v, %v; want %v", pw, ok, err, want)
		}
	}
}

func TestHashRoundTrip(t *testing.T) {
	small := Params{MemoryKiB: 64, Time: 1, Threads: 1, SaltLen: 16, KeyLen: 32}
	h1, err := Hash("correct horse battery", small)
	if err != nil {
		t.Fatal(err)
	}
	h2, _ := Hash("correct horse battery", small)
	if h1 == h2 {
		t.Error("two hashes of one password are equal: the salt is not random")
	}
	if !strings.HasPrefix(h1, "$argon2id$v=19$m=64,t=1,p=1$") {
		t.Errorf("hash %s does not carry its parameters", h1)
	}
	if ok, _ := Verify("correct horse battery", h1); !ok {
		t.Error("the password does not verify against its own hash")
	}
	if ok, _ := Verify("correct horse batterz", h1); ok {
		t.Error("a wrong password verifies")
	}
	for _, bad := range []string{"", "plain", "$argon2i$v=19$m=64,t=1,p=1$c29tZXNhbHQ$CTFhFdXPJO1aFaMaO6Mm5c8y7cJHAph8ArZWb2GRPPc", "$argon2id$v=16$m=64,t=1,p=1$c29tZXNhbHQ$CTFhFdXPJO1aFaMaO6Mm5c8y7cJHAph8ArZWb2GRPPc"} {
		if _, err := Verify("x", bad); err == nil {
			t.Errorf("Verify accepted malformed %q", bad)
		}
	}
}
