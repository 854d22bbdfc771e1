package lab

import (
	"context"
	"time"
)

// Topology is what the service knows of its database's replication: whether
// it serves reads only (its database is a standby), its read replicas, and
// the WAL position that covers a write. It holds no rule of the lab; the
// api refuses writes, routes lag-tolerant reads and reports by it.
type Topology interface {
	// ReadOnly reports whether the database was last found in recovery.
	ReadOnly() bool
	// NoteError reports whether err says the database refused a write as
	// a standby, and switches to read-only mode when it does.
	NoteError(err error) bool
	HasReplicas() bool
	Replicas() []ReplicaStatus
	// PrimaryReads counts the lag-tolerant reads kept on the primary.
	PrimaryReads() uint64
	// WriteLSN returns the primary's WAL position, which covers every write
	// committed before the call.
	WriteLSN(ctx context.Context) (string, error)
	// ReadsFor returns where a lag-tolerant read goes: a read replica
	// within the lag bound that has replayed afterLSN ("" for any), or the
	// primary.
	ReadsFor(afterLSN string) Reader
}

// ReplicaStatus is what Replicas reports of one read replica.
type ReplicaStatus struct {
	Name   string        // user@host:port/database, without password
	InUse  bool          // reads go to it
	Lag    time.Duration // how far behind the primary; -1 when unknown
	Reason string        // why it gets no reads; empty when InUse
	Reads  uint64        // reads handed to it since start
}
