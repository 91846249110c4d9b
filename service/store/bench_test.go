package store

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"sync/atomic"
	"testing"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	bolt "go.etcd.io/bbolt"
)

// Batch sizes (points per commit, i.e. per fsync) of the durable-append
// benchmarks: MaxBatch of the store, the transaction size of the raw
// reference.
var benchBatches = []int{16, 256, 4096}

// rawPointsPerS holds BenchmarkRawBolt's last figure per batch size, so that
// BenchmarkAppendDurable, declared after it and so run after it in the same
// `go test -bench` run, reports its ratio to the reference (x_raw).
var rawPointsPerS = map[int]float64{}

const benchScanID = "01BENCH"

// BenchmarkRawBolt is the reference: a single goroutine building the same
// point records, marshalling them the same way and writing them with plain
// bbolt into the same layout (nested bucket, big-endian seq keys), `batch`
// points per db.Update, i.e. one fsync per batch.
func BenchmarkRawBolt(b *testing.B) {
	for _, batch := range benchBatches {
		b.Run(fmt.Sprintf("batch=%d", batch), func(b *testing.B) {
			db := openRawBolt(b)
			keys := make([]byte, 8*batch)
			b.ResetTimer()
			start := time.Now()
			rawWrite(b, db, keys, 0, b.N, batch)
			rate := float64(b.N) / time.Since(start).Seconds()
			b.StopTimer()
			b.ReportMetric(rate, "points/s")
			b.ReportMetric(float64(batch), "points/commit")
			rawPointsPerS[batch] = rate
		})
	}
}

// BenchmarkAppendDurable: points/s through AppendPoint until Sync says all
// are durable, one producer going as fast as the queue lets it, with
// MaxBatch = batch. Reports the points per commit reached and, when
// BenchmarkRawBolt ran first in the same run, the ratio x_raw to it.
// Targets: ≥ 5000 points/s and x_raw ≥ 0.7.
func BenchmarkAppendDurable(b *testing.B) {
	for _, batch := range benchBatches {
		b.Run(fmt.Sprintf("batch=%d", batch), func(b *testing.B) {
			s, err := Open(filepath.Join(b.TempDir(), "store.db"), Options{MaxBatch: batch})
			if err != nil {
				b.Fatal(err)
			}
			defer s.Close()
			ctx := context.Background()
			if err := s.CreateScan(ctx, testScan(benchScanID, "bench", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
				b.Fatal(err)
			}
			var failed atomic.Int64
			done := func(_ *glissv1.Point, err error) {
				if err != nil {
					failed.Add(1)
				}
			}
			commits0, items0 := s.commits.Load(), s.committedItems.Load()
			b.ResetTimer()
			start := time.Now()
			for i := 0; i < b.N; i++ {
				if err := s.AppendPoint(ctx, testPoint(benchScanID, uint64(i)), done); err != nil {
					b.Fatal(err)
				}
			}
			if err := s.Sync(ctx); err != nil {
				b.Fatal(err)
			}
			rate := float64(b.N) / time.Since(start).Seconds()
			b.StopTimer()
			if n := failed.Load(); n > 0 {
				b.Fatalf("%d points failed", n)
			}
			commits := s.commits.Load() - commits0
			b.ReportMetric(rate, "points/s")
			b.ReportMetric(float64(s.committedItems.Load()-items0)/float64(max(commits, 1)), "points/commit")
			if raw := rawPointsPerS[batch]; raw > 0 {
				b.ReportMetric(rate/raw, "x_raw")
			}
		})
	}
}

// BenchmarkReadPoints100k exports a 100,000-point scan through ReadPoints
// and reports the peak HeapInuse seen during the export (sampled every 1024
// points) next to the size of the data: chunked reads keep the heap far
// below the data size.
func BenchmarkReadPoints100k(b *testing.B) {
	const n = 100_000
	path := filepath.Join(b.TempDir(), "read.db")
	s, err := Open(path, Options{})
	if err != nil {
		b.Fatal(err)
	}
	defer s.Close()
	ctx := context.Background()
	if err := s.CreateScan(ctx, testScan(benchScanID, "export", glissv1.ScanState_SCAN_STATE_SUCCEEDED, t0)); err != nil {
		b.Fatal(err)
	}
	for seq := uint64(0); seq < n; seq++ {
		if err := s.AppendPoint(ctx, testPoint(benchScanID, seq), nil); err != nil {
			b.Fatal(err)
		}
	}
	if err := s.Sync(ctx); err != nil {
		b.Fatal(err)
	}
	fi, err := os.Stat(path)
	if err != nil {
		b.Fatal(err)
	}
	const mib = 1 << 20
	var ms runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&ms)
	base := ms.HeapInuse
	peak := base
	b.ResetTimer()
	start := time.Now()
	for i := 0; i < b.N; i++ {
		var got uint64
		err := s.ReadPoints(ctx, benchScanID, 0, func(p *glissv1.Point) error {
			if got%1024 == 0 {
				runtime.ReadMemStats(&ms)
				peak = max(peak, ms.HeapInuse)
			}
			got++
			return nil
		})
		if err != nil {
			b.Fatal(err)
		}
		if got != n {
			b.Fatalf("read %d points, want %d", got, n)
		}
	}
	rate := float64(b.N) * n / time.Since(start).Seconds()
	b.StopTimer()
	b.ReportMetric(float64(peak)/mib, "peak_heap_inuse_MiB")
	b.ReportMetric(float64(peak-base)/mib, "heap_growth_MiB")
	b.ReportMetric(float64(fi.Size())/mib, "db_file_MiB")
	b.ReportMetric(rate, "points/s")

	// For scale: the heap the same scan takes when held whole in memory.
	all := make([]*glissv1.Point, 0, n)
	if err := s.ReadPoints(ctx, benchScanID, 0, func(p *glissv1.Point) error {
		all = append(all, p)
		return nil
	}); err != nil {
		b.Fatal(err)
	}
	runtime.GC()
	runtime.ReadMemStats(&ms)
	b.ReportMetric(float64(ms.HeapInuse-min(base, ms.HeapInuse))/mib, "whole_scan_in_heap_MiB")
	runtime.KeepAlive(all)
}

func openRawBolt(b *testing.B) *bolt.DB {
	db, err := bolt.Open(filepath.Join(b.TempDir(), "raw.db"), 0o600, &bolt.Options{Timeout: time.Second})
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { _ = db.Close() })
	err = db.Update(func(tx *bolt.Tx) error {
		pts, err := tx.CreateBucket(bucketPoints)
		if err != nil {
			return err
		}
		_, err = pts.CreateBucket([]byte(benchScanID))
		return err
	})
	if err != nil {
		b.Fatal(err)
	}
	return db
}

// rawWrite writes points [from, from+n) with plain bbolt, batch per Update.
func rawWrite(b *testing.B, db *bolt.DB, keys []byte, from, n, batch int) {
	for i := from; i < from+n; i += batch {
		m := min(batch, from+n-i)
		err := db.Update(func(tx *bolt.Tx) error {
			pb := tx.Bucket(bucketPoints).Bucket([]byte(benchScanID))
			pb.FillPercent = 0.95
			for j := 0; j < m; j++ {
				seq := uint64(i + j)
				data, err := marshalOpts.Marshal(testPoint(benchScanID, seq))
				if err != nil {
					return err
				}
				if err := pb.Put(putSeqKey(keys[8*j:], seq), data); err != nil {
					return err
				}
			}
			return nil
		})
		if err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkDurableVsRaw runs the store and the raw reference side by side,
// alternating rounds of 8 batches on each, so that the ratio is not skewed by
// the fsync latency of a shared disk drifting between two benchmarks. One op
// is one point written by each.
func BenchmarkDurableVsRaw(b *testing.B) {
	for _, batch := range benchBatches {
		b.Run(fmt.Sprintf("batch=%d", batch), func(b *testing.B) {
			ctx := context.Background()
			s, err := Open(filepath.Join(b.TempDir(), "store.db"), Options{MaxBatch: batch})
			if err != nil {
				b.Fatal(err)
			}
			defer s.Close()
			if err := s.CreateScan(ctx, testScan(benchScanID, "bench", glissv1.ScanState_SCAN_STATE_RUNNING, t0)); err != nil {
				b.Fatal(err)
			}
			db := openRawBolt(b)
			keys := make([]byte, 8*batch)
			var failed atomic.Int64
			done := func(_ *glissv1.Point, err error) {
				if err != nil {
					failed.Add(1)
				}
			}
			storeWrite := func(from, n int) {
				for i := from; i < from+n; i++ {
					if err := s.AppendPoint(ctx, testPoint(benchScanID, uint64(i)), done); err != nil {
						b.Fatal(err)
					}
				}
				if err := s.Sync(ctx); err != nil {
					b.Fatal(err)
				}
			}
			var tRaw, tStore time.Duration
			var ratios []float64 // per round: raw time / store time = store rate / raw rate
			round := 8 * batch
			b.ResetTimer()
			for i, r := 0, 0; i < b.N; i, r = i+round, r+1 {
				n := min(round, b.N-i)
				var dRaw, dStore time.Duration
				for k := 0; k < 2; k++ {
					start := time.Now()
					if (r+k)%2 == 0 {
						rawWrite(b, db, keys, i, n, batch)
						dRaw = time.Since(start)
					} else {
						storeWrite(i, n)
						dStore = time.Since(start)
					}
				}
				tRaw += dRaw
				tStore += dStore
				ratios = append(ratios, dRaw.Seconds()/dStore.Seconds())
			}
			b.StopTimer()
			slices.Sort(ratios)
			if n := failed.Load(); n > 0 {
				b.Fatalf("%d points failed", n)
			}
			store, raw := float64(b.N)/tStore.Seconds(), float64(b.N)/tRaw.Seconds()
			b.ReportMetric(store, "store_points/s")
			b.ReportMetric(raw, "raw_points/s")
			b.ReportMetric(store/raw, "x_raw")
			// The median over rounds resists bursts of load from other
			// processes on a shared machine that hit one side only.
			b.ReportMetric(ratios[len(ratios)/2], "x_raw_median")
		})
	}
}
