package outbox

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"

	"go.etcd.io/bbolt"
)

// errNoChange rolls back a write transaction that changed nothing, so that
// it costs no commit.
var errNoChange = errors.New("no change")

// errf wraps err in the package's wording: "outbox <path>: <step>: <err>".
func (o *Outbox) errf(step string, err error) error {
	return fmt.Errorf("outbox %s: %s: %w", o.path, step, err)
}

// Append stores recs in one fsync'd transaction and returns copies with Seq
// set (and a zero At set to now); recs is not changed and its Data is not
// kept. In the same transaction the oldest records past MaxBytes or MaxAge
// are evicted and counted in Stats.Dropped (some of recs themselves when
// they alone exceed MaxBytes). A record larger than MaxBytes on its own
// fails the whole call with ErrTooLarge, and nothing is stored.
func (o *Outbox) Append(recs []Record) ([]Record, error) {
	if len(recs) == 0 {
		return nil, nil
	}
	now := o.now()
	out := make([]Record, len(recs))
	valLen := 0
	for i, r := range recs {
		if s := r.size(); s > o.maxBytes {
			return nil, o.errf("append", fmt.Errorf("record %d (id %q): %w: %d bytes, max %d", i, r.ID, ErrTooLarge, s, o.maxBytes))
		}
		if r.At.IsZero() {
			r.At = now
		}
		out[i] = r
		valLen += encodedSize(&r)
	}

	o.life.RLock()
	defer o.life.RUnlock()
	if o.closed {
		return nil, o.errf("append", ErrClosed)
	}
	o.wmu.Lock()
	defer o.wmu.Unlock()

	// bbolt keeps the key and value slices until the commit: one buffer
	// each, allocated to size so that appending never moves them.
	keys := make([]byte, 0, 8*len(out))
	vals := make([]byte, 0, valLen)
	c := o.cur
	var dropped int64
	err := o.db.Update(func(tx *bbolt.Tx) error {
		b := tx.Bucket(bucketRecords)
		b.FillPercent = fillPercent
		seq := b.Sequence()
		for i := range out {
			seq++
			out[i].Seq = seq
			ks, vs := len(keys), len(vals)
			keys = key(keys, seq)
			vals = encode(vals, &out[i])
			if err := b.Put(keys[ks:len(keys):len(keys)], vals[vs:len(vals):len(vals)]); err != nil {
				return err
			}
			c.count++
			c.bytes += out[i].size()
		}
		if err := b.SetSequence(seq); err != nil {
			return err
		}
		var err error
		if dropped, err = o.evict(tx, &c); err != nil {
			return err
		}
		return putContent(tx, c)
	})
	if err != nil {
		return nil, o.errf("append", err)
	}
	o.commit(c, int64(len(out)), 0, dropped)
	return out, nil
}

// commit records what a committed transaction did. Called with wmu held.
func (o *Outbox) commit(c content, appended, deleted, dropped int64) {
	o.cur = c
	o.smu.Lock()
	defer o.smu.Unlock()
	o.stats.Pending, o.stats.PendingBytes, o.stats.Oldest = c.count, c.bytes, c.oldest
	o.stats.Appended += appended
	o.stats.Deleted += deleted
	o.stats.Dropped += dropped
}

// Read returns up to max records with Seq > after, oldest first. The
// records are copies: the caller may keep them.
func (o *Outbox) Read(after uint64, max int) ([]Record, error) {
	if max <= 0 {
		return nil, o.errf("read", fmt.Errorf("%w: max %d, want at least 1", ErrInvalidOption, max))
	}
	if after == math.MaxUint64 {
		return nil, nil
	}
	o.life.RLock()
	defer o.life.RUnlock()
	if o.closed {
		return nil, o.errf("read", ErrClosed)
	}
	var out []Record
	err := o.db.View(func(tx *bbolt.Tx) error {
		c := tx.Bucket(bucketRecords).Cursor()
		for k, v := c.Seek(key(nil, after+1)); k != nil && len(out) < max; k, v = c.Next() {
			r, err := decode(k, v)
			if err != nil {
				return fmt.Errorf("record %x: %w", k, err)
			}
			if out == nil {
				out = make([]Record, 0, min(max, 1024))
			}
			out = append(out, r)
		}
		return nil
	})
	if err != nil {
		return nil, o.errf("read", err)
	}
	return out, nil
}

// Delete removes acknowledged records in one fsync'd transaction. Seqs that
// are not (or no longer) in the outbox are skipped: a record evicted or
// deleted before its acknowledgement is fine.
func (o *Outbox) Delete(seqs []uint64) error {
	if len(seqs) == 0 {
		return nil
	}
	o.life.RLock()
	defer o.life.RUnlock()
	if o.closed {
		return o.errf("delete", ErrClosed)
	}
	o.wmu.Lock()
	defer o.wmu.Unlock()

	c := o.cur
	var n int64
	err := o.db.Update(func(tx *bbolt.Tx) error {
		b := tx.Bucket(bucketRecords)
		var k [8]byte
		for _, seq := range seqs {
			binary.BigEndian.PutUint64(k[:], seq)
			v := b.Get(k[:])
			if v == nil {
				continue
			}
			h, err := decodeHeader(v)
			if err != nil {
				return fmt.Errorf("record %d: %w", seq, err)
			}
			c.count--
			c.bytes -= h.size()
			n++
			if err := b.Delete(k[:]); err != nil {
				return err
			}
		}
		if n == 0 {
			return errNoChange
		}
		var err error
		if c.oldest, err = oldest(b); err != nil {
			return err
		}
		return putContent(tx, c)
	})
	switch {
	case errors.Is(err, errNoChange):
		return nil
	case err != nil:
		return o.errf("delete", err)
	}
	o.commit(c, 0, n, 0)
	return nil
}
