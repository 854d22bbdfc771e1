package lab

import "context"

// Unit is what a write needs of the store to be one unit with its answer:
// Atomically runs fn in one transaction that every store call made with
// fn's context joins, and commits only when fn returns nil; ClaimKey and
// StoreAnswer keep a write's answer under the client's Idempotency-Key in
// that transaction.
type Unit interface {
	Atomically(ctx context.Context, fn func(ctx context.Context) error) error
	ClaimKey(ctx context.Context, c KeyClaim) (*StoredAnswer, error)
	StoreAnswer(ctx context.Context, c KeyClaim, a StoredAnswer) error
}

// KeyClaim is one use of an Idempotency-Key on a write other than a run:
// the key, the token it is scoped to, the operation and the hash that
// identifies the request (the same key on another operation or with another
// body is refused).
type KeyClaim struct {
	TokenID     string
	Key         string
	Operation   string
	RequestHash []byte
}

// StoredAnswer is a write's answer as it was sent: status, Location and body.
type StoredAnswer struct {
	Status   int
	Location string
	Body     []byte
}

// Atomically runs fn as one unit with the store: the writes made with fn's
// context and whatever fn does after them (the api encodes its answer) are
// committed together or not at all.
func (s *Service) Atomically(ctx context.Context, fn func(ctx context.Context) error) error {
	return s.store.Atomically(ctx, fn)
}

// ClaimKey claims c inside Atomically: nil for a new key, the stored answer
// for a retry of the same request, KindInvalid for a key reused with another
// request.
func (s *Service) ClaimKey(ctx context.Context, c KeyClaim) (*StoredAnswer, error) {
	if len(c.Key) > MaxIdempotencyKeyLen {
		return nil, ParamError(KindInvalid, InHeader, "Idempotency-Key", "Idempotency-Key must be at most %d characters", MaxIdempotencyKeyLen)
	}
	if c.TokenID == "" {
		return nil, Errorf(KindInvalid, "an Idempotency-Key needs the token id it is scoped to")
	}
	return s.store.ClaimKey(ctx, c)
}

// StoreAnswer keeps a under the key ClaimKey claimed, inside the same unit.
func (s *Service) StoreAnswer(ctx context.Context, c KeyClaim, a StoredAnswer) error {
	return s.store.StoreAnswer(ctx, c, a)
}
