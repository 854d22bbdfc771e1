package store

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"slices"
	"sync"
	"sync/atomic"
	"time"

	"github.com/jackc/pgx/v5"

	"curvekeeper/lab"
)

// Writing a run costs the database far more per statement and per round
// trip than per row: measured on PostgreSQL 15 with 16 writers on 2 cores, a
// run written alone (claim, run, readings, curve, audit rows, commit) took
// about 1.0–1.6 ms of PostgreSQL CPU, and the same rows of 8 runs written
// as one statement per table about 0.42–0.5 ms per run. runWrites therefore
// writes the runs that arrive while a write is in flight together, as one
// group (the group-commit pattern, as tokenLookups does for reads):
//
//   - A group and a run alone are written by the same statements (runRows):
//     the same ids, payload, report, audit rows, results and events.
//   - A group is one pipeline ending in one Sync, which PostgreSQL runs as
//     one implicit transaction: every run of it is stored, or none is.
//   - A run's caller is answered only after the group committed, so a 201
//     means the run is durable exactly as before.
//   - Any error rolls the whole group back, and then every run of it is
//     written by createRunAlone in its own transaction, which gives each its
//     own answer: a replay for an idempotency key already used, a 400 for a
//     duplicate sample id, and so on. A group never has to tell its runs'
//     errors apart.
//   - The idempotency keys of a group are claimed first, with a plain INSERT
//     in (token, key) order: a key another transaction holds makes the
//     group wait for it, as a run alone would, and a key already used fails
//     the group, whose runs then go alone; two groups claim shared keys in
//     the same order, so they cannot deadlock on them.
//   - The result feed lock (ResultFeedLockKey) is taken after every
//     statement that can wait on another transaction, as flushEvents does.
//
// A run that finds fewer than writeStatements groups in flight starts one at
// once, so an idle service writes each run as soon as it arrives.
type runWrites struct {
	db      *DB
	max     int           // groups in flight at once
	size    int           // runs in one group at most
	timeout time.Duration // of one group's statement

	mu      sync.Mutex
	pending []*runWrite
	running int

	// Groups written, the runs they held, and runs sent alone after their
	// group failed.
	groups, grouped, alone atomic.Int64
}

// runWrite is one run waiting to be written, and once done is closed, the
// outcome: nil (stored), errWriteAlone, or the caller's context error.
type runWrite struct {
	ctx     context.Context
	in      *lab.RunInput
	runID   string
	payload []byte // runs.payload
	body    []byte // the 201 body kept with the idempotency key
	curves  []preparedCurve

	done chan struct{}
	err  error
}

// errWriteAlone tells a caller that its run's group was not stored and that
// it must write the run in a transaction of its own.
var errWriteAlone = errors.New("store: write the run alone")

// errStoredByGroup is createRunAlone's finding that the run's group stored
// it after all (its commit was reported as failed).
var errStoredByGroup = errors.New("store: the run was stored by its group")

const (
	writeStatements = 2
	writeGroupSize  = 32
	writeTimeout    = 30 * time.Second
)

func (db *DB) writes() *runWrites {
	db.writesOnce.Do(func() {
		db.runWrites = &runWrites{db: db, max: writeStatements, size: writeGroupSize, timeout: writeTimeout}
	})
	return db.runWrites
}

// RunWriteStats returns the counts of CreateRun's writes.
func (db *DB) RunWriteStats() lab.RunWriteStats {
	r := db.writes()
	return lab.RunWriteStats{Groups: r.groups.Load(), Grouped: r.grouped.Load(), Alone: r.alone.Load()}
}

// do queues w and waits for its group's outcome.
func (r *runWrites) do(w *runWrite) error {
	w.done = make(chan struct{})
	r.mu.Lock()
	r.pending = append(r.pending, w)
	start := r.running < r.max
	if start {
		r.running++
	}
	r.mu.Unlock()
	if start {
		go r.run()
	}
	select {
	case <-w.done:
		return w.err
	case <-w.ctx.Done():
		// The group may still store the run: the caller's answer is then
		// lost, as with a connection lost during a commit, and a retry with
		// the same Idempotency-Key is answered from the stored run.
		return w.ctx.Err()
	}
}

// run writes groups until none is pending.
func (r *runWrites) run() {
	for {
		r.mu.Lock()
		if len(r.pending) == 0 {
			r.running--
			r.mu.Unlock()
			return
		}
		n := min(len(r.pending), r.size)
		group := slices.Clone(r.pending[:n])
		r.pending = slices.Delete(r.pending, 0, n)
		r.mu.Unlock()
		r.write(group)
	}
}

// write stores group in one implicit transaction and answers its callers.
func (r *runWrites) write(group []*runWrite) {
	live := group[:0:0]
	for _, w := range group {
		if w.ctx.Err() != nil {
			w.err = w.ctx.Err() // gone before its group began: nothing written
			close(w.done)
			continue
		}
		live = append(live, w)
	}
	if len(live) == 0 {
		return
	}
	err := errWriteAlone
	if b, berr := runRows(live, true); berr == nil {
		ctx, cancel := context.WithTimeout(context.Background(), r.timeout)
		if r.db.Pool.SendBatch(ctx, b).Close() == nil {
			err = nil
		}
		cancel()
	}
	if err == nil {
		r.groups.Add(1)
		r.grouped.Add(int64(len(live)))
	} else {
		r.alone.Add(int64(len(live)))
	}
	for _, w := range live {
		w.err = err
		close(w.done)
	}
}

// The ids of a group go as text[] and are cast in SQL: pgx has no binary
// encoding of a Go []string as uuid[], and would build an error for each
// such parameter before falling back to text.
const (
	sqlGroupClaimKeys = `
INSERT INTO idempotency_keys (token_id, key, request_hash, run_id, response_status, response_body)
SELECT u.token_id::uuid, u.key, u.request_hash, u.run_id::uuid, 201, u.body
FROM unnest($1::text[], $2::text[], $3::bytea[], $4::text[], $5::jsonb[]) AS u(token_id, key, request_hash, run_id, body)
ORDER BY u.token_id, u.key`
	sqlGroupInsertRuns = `
INSERT INTO runs (id, method, method_revision, instrument, acquired_at, operator, received_by, source_format, request_hash, payload)
SELECT u.id::uuid, u.method, u.method_revision, u.instrument, u.acquired_at, u.operator, u.received_by, u.source_format,
       u.request_hash, u.payload
FROM unnest($1::text[], $2::text[], $3::int[], $4::text[], $5::timestamptz[], $6::text[], $7::text[],
            $8::text[], $9::bytea[], $10::jsonb[])
     AS u(id, method, method_revision, instrument, acquired_at, operator, received_by, source_format, request_hash, payload)`
	sqlGroupInsertReadings = `
INSERT INTO readings (run_id, analyte, level, replicate, standard, concentration, response)
SELECT u.run_id::uuid, u.analyte, u.level, u.replicate, u.standard, u.concentration, u.response
FROM unnest($1::text[], $2::text[], $3::text[], $4::int[], $5::int[], $6::float8[], $7::float8[])
     AS u(run_id, analyte, level, replicate, standard, concentration, response)`
	sqlGroupInsertCurves = `
INSERT INTO curves (id, run_id, method, method_revision, instrument, analyte, unit, model, weighting, verdict,
                    engine_version, report, acquired_at, created_by, slope, intercept, residual_sd, r_squared, lod,
                    failed_checks, is_response)
SELECT u.id::uuid, u.run_id::uuid, u.method, u.method_revision, u.instrument, u.analyte, u.unit, u.model, u.weighting, u.verdict,
       u.engine_version, u.report, u.acquired_at, u.created_by, u.slope, u.intercept, u.residual_sd, u.r_squared, u.lod,
       ARRAY(SELECT json_array_elements_text(u.failed)), u.is_response
FROM unnest($1::text[], $2::text[], $3::text[], $4::int[], $5::text[], $6::text[], $7::text[], $8::text[], $9::text[],
            $10::text[], $11::text[], $12::json[], $13::timestamptz[], $14::text[], $15::float8[], $16::float8[],
            $17::float8[], $18::float8[], $19::float8[], $20::json[], $21::float8[])
     WITH ORDINALITY AS u(id, run_id, method, method_revision, instrument, analyte, unit, model, weighting, verdict,
                          engine_version, report, acquired_at, created_by, slope, intercept, residual_sd, r_squared,
                          lod, failed, is_response, n)
ORDER BY u.n`
	sqlGroupInsertAudit = `
INSERT INTO audit (actor, action, entity_type, entity_id, detail)
SELECT u.actor, u.action, u.entity_type, u.entity_id, u.detail
FROM unnest($1::text[], $2::text[], $3::text[], $4::text[], $5::jsonb[])
     WITH ORDINALITY AS u(actor, action, entity_type, entity_id, detail, n)
ORDER BY u.n`
	// sqlGroupInsertResult is sqlInsertResult with its created event
	// ($22 the cause), for a group that holds the feed lock already.
	sqlGroupInsertResult = `
WITH r AS (` + sqlInsertResult + `, release_state, release_reason)
INSERT INTO result_events (result_id, kind, cause, release_state, previous_state, reason)
SELECT r.id, '` + lab.EventCreated + `', $22, r.release_state, NULL, r.release_reason FROM r`
)

// runRows queues the rows of every run of group, table by table: with
// claims, the idempotency keys first (plain INSERTs, for a group); then the
// runs, readings, samples, curves, audit rows and, after the result feed
// lock, the results with their created events. createRunAlone sends it for
// one run after claiming the key itself.
func runRows(group []*runWrite, claims bool) (*pgx.Batch, error) {
	var (
		kTokens, kKeys                                   []string
		kHashes, kBodies                                 [][]byte
		kRuns                                            []string
		rIDs, rMethods, rInstruments, rActors, rFormats  []string
		rRevisions                                       []int32
		rAt                                              []time.Time
		rOperators                                       []*string
		rHashes, rPayloads                               [][]byte
		gRuns, gAnalytes, gLevels                        []string
		gReplicates, gStandards                          []int32
		gConcs, gResponses                               []float64
		cIDs, cRuns, cMethods, cInstruments, cAnalytes   []string
		cUnits, cModels, cWeightings, cVerdicts, cEngine []string
		cActors                                          []string
		cFailed                                          [][]byte
		cRevisions                                       []int32
		cReports                                         [][]byte
		cAt                                              []time.Time
		cSlope, cIntercept, cSD, cR2, cLOD, cIS          []*float64
		aActors, aActions, aTypes, aIDs                  []string
		aDetails                                         [][]byte
	)
	b := &pgx.Batch{}
	var samples, results pgx.Batch // queued after the tables they refer to
	for _, w := range group {
		in := w.in
		if in.IdempotencyKey != "" {
			kTokens, kKeys = append(kTokens, in.TokenID), append(kKeys, in.IdempotencyKey)
			kHashes, kRuns, kBodies = append(kHashes, in.RequestHash), append(kRuns, w.runID), append(kBodies, w.body)
		}
		var operator *string
		if in.Operator != "" {
			operator = &in.Operator
		}
		rIDs, rMethods, rRevisions = append(rIDs, w.runID), append(rMethods, in.Method), append(rRevisions, int32(in.MethodRevision))
		rInstruments, rAt, rOperators = append(rInstruments, in.Instrument), append(rAt, in.AcquiredAt), append(rOperators, operator)
		rActors, rFormats = append(rActors, in.Actor), append(rFormats, in.SourceFormat)
		rHashes, rPayloads = append(rHashes, in.RequestHash), append(rPayloads, w.payload)
		for i, s := range in.Standards {
			for k, y := range s.Responses {
				gRuns, gAnalytes, gLevels = append(gRuns, w.runID), append(gAnalytes, s.Analyte), append(gLevels, s.Level)
				gReplicates, gStandards = append(gReplicates, int32(k+1)), append(gStandards, int32(i))
				gConcs, gResponses = append(gConcs, s.Concentration), append(gResponses, y)
			}
		}
		if len(in.Materials) > 0 {
			samples.Queue(sqlInsertRunMaterials, w.runID, in.Materials)
		}
		for i, s := range in.Samples {
			samples.Queue(sqlInsertSample, w.runID, i, s.ID, s.Analyte, s.Responses, s.Dilution, s.AcquiredAt)
		}
		for _, c := range w.curves {
			failed, err := json.Marshal(c.failed) // failed_checks is an array per curve; SQL has no array of arrays
			if err != nil {
				return nil, fmt.Errorf("store: marshal failed checks: %w", err)
			}
			cIDs, cRuns, cMethods = append(cIDs, c.id), append(cRuns, w.runID), append(cMethods, in.Method)
			cRevisions, cInstruments = append(cRevisions, int32(in.MethodRevision)), append(cInstruments, in.Instrument)
			cAnalytes, cUnits, cModels = append(cAnalytes, c.in.Analyte), append(cUnits, c.in.Unit), append(cModels, c.model)
			cWeightings, cVerdicts, cEngine = append(cWeightings, c.weighting), append(cVerdicts, c.verdict), append(cEngine, c.engine)
			cReports, cAt, cActors = append(cReports, c.report), append(cAt, in.AcquiredAt), append(cActors, in.Actor)
			cSlope, cIntercept = append(cSlope, c.scalars.slope), append(cIntercept, c.scalars.intercept)
			cSD, cR2, cLOD = append(cSD, c.scalars.residualSD), append(cR2, c.scalars.rSquared), append(cLOD, c.scalars.lod)
			cIS = append(cIS, c.scalars.isResponse)
			cFailed = append(cFailed, failed)
		}
		audits, err := runAudits(in, w.runID, w.curves)
		if err != nil {
			return nil, err
		}
		for _, a := range audits {
			aActors, aActions, aTypes = append(aActors, a.actor), append(aActions, a.action), append(aTypes, a.entityType)
			aIDs, aDetails = append(aIDs, a.entityID), append(aDetails, a.detail)
		}
		pending, err := runResults(in, w.curves)
		if err != nil {
			return nil, err
		}
		for _, p := range pending {
			q := p.q
			results.Queue(sqlGroupInsertResult, w.runID, p.position, p.curveID, p.unit, p.acquiredAt, q.Mean, q.Conc, q.SE,
				q.Low, q.High, q.Level, q.Bounded, q.Method, q.Flags, p.state, p.reason, in.Actor, p.reported, p.isCheck, p.sequence, p.uncertainty, lab.CauseRunCreate)
		}
	}
	if claims && len(kKeys) > 0 {
		b.Queue(sqlGroupClaimKeys, kTokens, kKeys, kHashes, kRuns, kBodies)
	}
	b.Queue(sqlGroupInsertRuns, rIDs, rMethods, rRevisions, rInstruments, rAt, rOperators, rActors, rFormats, rHashes, rPayloads)
	b.Queue(sqlGroupInsertReadings, gRuns, gAnalytes, gLevels, gReplicates, gStandards, gConcs, gResponses)
	b.QueuedQueries = append(b.QueuedQueries, samples.QueuedQueries...)
	if len(cIDs) > 0 {
		b.Queue(sqlGroupInsertCurves, cIDs, cRuns, cMethods, cRevisions, cInstruments, cAnalytes, cUnits, cModels,
			cWeightings, cVerdicts, cEngine, cReports, cAt, cActors, cSlope, cIntercept, cSD, cR2, cLOD, cFailed, cIS)
	}
	b.Queue(sqlGroupInsertAudit, aActors, aActions, aTypes, aIDs, aDetails)
	if results.Len() > 0 {
		b.Queue(`SELECT pg_advisory_xact_lock($1)`, ResultFeedLockKey)
		b.QueuedQueries = append(b.QueuedQueries, results.QueuedQueries...)
	}
	return b, nil
}
