// Package lab holds the laboratory's rules: a run against its method,
// ingest (validate, fit each analyte, judge drift, decide release),
// predictions, exclusions, verifications, release states, trends and
// review; the error kinds; the scopes and the caller. It imports calib and
// no HTTP or SQL package: the store implements the persistence interfaces
// declared here, where they are used, and the api translates HTTP into calls
// of Service.
//
// Every fit and reported value is an aid: local accreditation, regulation
// and the laboratory's SOP come first, and a qualified person reviews the
// results.
package lab

// Store is every persistence the lab's rules need.
type Store interface {
	RunStore
}

// Service applies the lab's rules over a store.
type Service struct {
	store Store
}

// NewService returns the rules over st.
func NewService(st Store) *Service { return &Service{store: st} }
