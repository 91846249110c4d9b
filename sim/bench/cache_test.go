package bench

import (
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// The yield cache changes speed, never results: a bench whose cache holds a
// single entry gives the same counts as one with the full cache.
func TestYieldCacheDoesNotChangeResults(t *testing.T) {
	full := newBench(t, Options{Seed: 8, Instant: true, PowerNoiseRel: -1})
	tiny := newBench(t, Options{Seed: 8, Instant: true, PowerNoiseRel: -1})
	tiny.Counter().(*Counter).st.yields = newYieldCache(1)
	a, b := script(t, full, false), script(t, tiny, false)
	if !sameRun(a, b) {
		t.Errorf("cache capacity changed the numbers:\n%+v\n%+v", a, b)
	}
}

func TestYieldCacheLRU(t *testing.T) {
	yc := newYieldCache(2)
	k := func(g float64) yieldKey {
		p := model.DemoParams()
		p.GDDPS2 = g
		return yieldKey{p: p, b: phonon.DemoBath()}
	}
	yc.put(k(1), [2]float64{1, 1})
	yc.put(k(2), [2]float64{2, 2})
	if _, ok := yc.get(k(1)); !ok { // 1 is now the most recent
		t.Fatal("entry 1 missing")
	}
	yc.put(k(3), [2]float64{3, 3}) // evicts 2, the least recent
	if _, ok := yc.get(k(2)); ok {
		t.Error("least recently used entry 2 kept")
	}
	for _, g := range []float64{1, 3} {
		if y, ok := yc.get(k(g)); !ok || y[0] != g {
			t.Errorf("entry %g: %v %v", g, y, ok)
		}
	}
	if yc.order.Len() != 2 || len(yc.byKey) != 2 {
		t.Errorf("cache holds %d/%d entries, capacity 2", yc.order.Len(), len(yc.byKey))
	}
}

// The sample temperature is part of the key: the same optical state at
// another temperature is another entry, and a temperature within the 0.01 K
// rounding of the counter is the same one.
func TestYieldCacheKeyHasTemperature(t *testing.T) {
	yc := newYieldCache(4)
	p := model.DemoParams()
	var tr truth
	tr.bath = phonon.DemoBath()
	yc.put(yieldKey{p, tr.bathAt(4.2)}, [2]float64{1, 1})
	if _, ok := yc.get(yieldKey{p, tr.bathAt(8)}); ok {
		t.Error("8 K found the 4.2 K entry")
	}
	if _, ok := yc.get(yieldKey{p, tr.bathAt(4.2 + 0.004)}); !ok {
		t.Error("4.204 K (rounded to 4.20 K) did not find the 4.2 K entry")
	}
	if b := tr.bathAt(4.2); b.TemperatureK != 4.2 {
		t.Errorf("4.2 K rounded to %v", b.TemperatureK)
	}
	if b := tr.bathAt(-1); b.TemperatureK != 0 {
		t.Errorf("-1 K clamped to %v, want 0", b.TemperatureK)
	}
	tr.bath = phonon.Bath{}
	if b := tr.bathAt(20); b != (phonon.Bath{}) {
		t.Errorf("no phonons: bath %+v at 20 K, want the zero bath", b)
	}
}
