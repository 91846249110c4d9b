package phonon

import (
	"context"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
)

// TestOffIsPlainModel: with b == nil or α = 0 every result is the plain
// model's, bit for bit (the requirement; checked with ==).
func TestOffIsPlainModel(t *testing.T) {
	s := NewSolver()
	zero := DemoBath()
	zero.AlphaPS2 = 0
	for _, gdd := range []float64{-20, 0, 7.5, 20} {
		for _, area := range []float64{1, 5.5, 12} {
			p := model.DemoParams()
			p.GDDPS2, p.AreaPi = gdd, area
			want, err := model.Solve(p)
			if err != nil {
				t.Fatal(err)
			}
			for _, b := range []*Bath{nil, &zero} {
				got, err := s.Solve(p, b)
				if err != nil {
					t.Fatal(err)
				}
				if got != want {
					t.Errorf("gdd %g area %g bath %v: %+v, plain model %+v", gdd, area, b, got, want)
				}
			}
		}
	}
	ms, err := Map(context.Background(), model.DemoParams(), nil, []float64{-10, 10}, model.AxisAreaPi, []float64{2, 6}, nil)
	if err != nil {
		t.Fatal(err)
	}
	mm, err := model.Map(context.Background(), model.DemoParams(), []float64{-10, 10}, model.AxisAreaPi, []float64{2, 6}, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := range mm {
		if ms[i] != mm[i] {
			t.Errorf("map point %d: %+v, plain model %+v", i, ms[i], mm[i])
		}
	}
}

// TestCoherentPartMatchesModel runs this package's integrator with the
// Redfield term off (the same code path otherwise) against the plain model:
// two independent integrations of PHYSICS.md §2 must agree to the tolerance.
func TestCoherentPartMatchesModel(t *testing.T) {
	s := NewSolver()
	for _, p := range demoGrid() {
		want, err := model.Solve(p)
		if err != nil {
			t.Fatal(err)
		}
		l := p.Ladder()
		st, err := s.solveLadder(&l, nil, DefaultTolerance)
		if err != nil {
			t.Fatal(err)
		}
		got := st.result()
		if d := maxDiff(got, want); d > 2e-6 {
			t.Errorf("gdd %g area %g: %+v, plain model %+v (|d| %.1e)", p.GDDPS2, p.AreaPi, got, want, d)
		}
	}
}

// TestAlphaToZero: as α → 0 the phonon result converges to the plain model,
// linearly in α (first-order perturbation in the bath coupling).
func TestAlphaToZero(t *testing.T) {
	s := NewSolver()
	for _, p := range demoGrid() {
		want, _ := model.Solve(p)
		var prev float64
		for k, alpha := range []float64{3e-3, 3e-4, 3e-5, 3e-8} {
			b := Bath{AlphaPS2: alpha, CutoffMeV: 1.2, TemperatureK: 4.2}
			got, err := s.Solve(p, &b)
			if err != nil {
				t.Fatal(err)
			}
			d := maxDiff(got, want)
			if k > 0 && d > 0.2*prev+3e-6 {
				t.Errorf("gdd %g area %g: α %g: |d| %.2e did not shrink ~10× from %.2e", p.GDDPS2, p.AreaPi, alpha, d, prev)
			}
			if alpha == 3e-8 && d > 3e-6 {
				t.Errorf("gdd %g area %g: α %g: |d| %.2e from the plain model, want ≤ 3e-6", p.GDDPS2, p.AreaPi, alpha, d)
			}
			prev = d
		}
	}
}

func demoGrid() []model.Params {
	var out []model.Params
	for _, gdd := range []float64{-20, 10, 25} {
		for _, area := range []float64{3, 9} {
			p := model.DemoParams()
			p.GDDPS2, p.AreaPi = gdd, area
			out = append(out, p)
		}
	}
	return out
}

func maxDiff(a, b model.Result) float64 {
	return max(math.Abs(a.G-b.G), math.Abs(a.X-b.X), math.Abs(a.XX-b.XX), math.Abs(a.NX-b.NX), math.Abs(a.NXX-b.NXX))
}

type constRabi float64

func (c constRabi) RabiAt(float64) float64 { return float64(c) }

// TestDetailedBalance: under a constant drive the dressed-state populations
// relax to the Boltzmann ratio p_i/p_j = exp(−ħ(ω_i−ω_j)/kT) at the bath
// temperature, because S(ω)/S(−ω) = e^{ħω/kT} (Kubo–Martin–Schwinger; Breuer &
// Petruccione 2002, §3.3.2: the Gibbs state is stationary).
func TestDetailedBalance(t *testing.T) {
	for _, tc := range []struct {
		tempK, rabi, e1, e2 float64
	}{
		{10, 2.0, 1.5, 0.8},
		{4.2, 1.5, 2.5, -1.0},
		{30, 3.0, -1.2, 2.0},
	} {
		b := Bath{AlphaPS2: 0.05, CutoffMeV: 2.0, TemperatureK: tc.tempK}
		l := model.Ladder{
			EnergyRadPS: [3]float64{0, tc.e1, tc.e2},
			Coupling:    [2]float64{1, 1},
			Envelope:    constRabi(tc.rabi),
			StartPS:     0,
			EndPS:       1500,
			MaxStepPS:   5,
		}
		s := NewSolver()
		st, err := s.solveLadder(&l, &b, 1e-10)
		if err != nil {
			t.Fatal(err)
		}
		var h, v [3][3]float64
		var e [3]float64
		h[1][1], h[2][2] = tc.e1, tc.e2
		h[0][1], h[1][0], h[1][2], h[2][1] = -tc.rabi/2, -tc.rabi/2, -tc.rabi/2, -tc.rabi/2
		symEig3(&h, &e, &v)
		var re [3][3]complex128
		transformToEig(&v, &st.rho, &re)
		kT := BoltzmannMeVPerK * tc.tempK / HbarMeVPS // rad/ps
		t.Logf("T %g K: dressed energies %.4f %.4f %.4f rad/ps, populations %.6f %.6f %.6f", tc.tempK,
			e[0], e[1], e[2], real(re[0][0]), real(re[1][1]), real(re[2][2]))
		for i := range 3 {
			for j := i + 1; j < 3; j++ {
				got := real(re[i][i]) / real(re[j][j])
				want := math.Exp(-(e[i] - e[j]) / kT)
				if math.Abs(got/want-1) > 1e-5 {
					t.Errorf("T %g K: p%d/p%d = %.8f, Boltzmann %.8f", tc.tempK, i, j, got, want)
				}
			}
			if c := math.Abs(imag(re[i][(i+1)%3])) + math.Abs(real(re[i][(i+1)%3])); c > 1e-6 {
				t.Errorf("T %g K: dressed coherence %d,%d = %.2e, want → 0", tc.tempK, i, (i+1)%3, c)
			}
		}
	}
}

// TestSpectrum checks S(ω) against PHYSICS.md §7 written out independently
// here: 2π·J(ω)·(n+1) for ω > 0, 2π·J(|ω|)·n for ω < 0, n = 1/(e^{ħω/kT} − 1),
// and the ratio S(ω)/S(−ω) = e^{ħω/kT}.
func TestSpectrum(t *testing.T) {
	b := Bath{AlphaPS2: 0.03, CutoffMeV: 1.2, TemperatureK: 4.2}
	wc := 1.2 / 0.6582119569
	kT := 0.08617333 * 4.2 / 0.6582119569
	for _, w := range []float64{0.01, 0.3, 1, 1.8, 4} {
		j := 0.03 * w * w * w * math.Exp(-w*w/(wc*wc))
		n := 1 / (math.Exp(w/kT) - 1)
		if got, want := b.SpectrumPerPS(w), 2*math.Pi*j*(n+1); math.Abs(got-want) > 1e-13*want+1e-300 {
			t.Errorf("S(%g) = %g, want %g", w, got, want)
		}
		if got, want := b.SpectrumPerPS(-w), 2*math.Pi*j*n; math.Abs(got-want) > 1e-12*want+1e-300 {
			t.Errorf("S(%g) = %g, want %g", -w, got, want)
		}
		if r := b.SpectrumPerPS(w) / b.SpectrumPerPS(-w); math.Abs(r/math.Exp(w/kT)-1) > 1e-12 {
			t.Errorf("S(%g)/S(−%g) = %g, want e^{ħω/kT} = %g", w, w, r, math.Exp(w/kT))
		}
	}
	if s := b.SpectrumPerPS(0); s != 0 {
		t.Errorf("S(0) = %g, want 0 (J(0) = 0)", s)
	}
	cold := Bath{AlphaPS2: 0.03, CutoffMeV: 1.2, TemperatureK: 0}
	if s := cold.SpectrumPerPS(-1); s != 0 {
		t.Errorf("T = 0: S(−1) = %g, want 0 (no absorption)", s)
	}
	if got, want := cold.SpectrumPerPS(1), 2*math.Pi*0.03*math.Exp(-1/(wc*wc)); math.Abs(got-want) > 1e-15 {
		t.Errorf("T = 0: S(1) = %g, want %g", got, want)
	}
}

// TestSymEig3 checks the Jacobi eigensolver: H·v = λ·v, orthonormal V, also
// for nearly degenerate and strongly scaled matrices.
func TestSymEig3(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	mats := [][3][3]float64{
		{{0, -1e-9, 0}, {-1e-9, 1e-12, -1e-9}, {0, -1e-9, 3}},
		{{0, 0, 0}, {0, 0, 0}, {0, 0, 0}},
		{{5, 0, 0}, {0, -2, 0}, {0, 0, 1}},
		{{0, -1e-6, 0}, {-1e-6, 4, -1e-6}, {0, -1e-6, 4 + 1e-9}},
	}
	for range 200 {
		var m [3][3]float64
		for i := range 3 {
			for j := i; j < 3; j++ {
				m[i][j] = rng.NormFloat64() * math.Pow(10, float64(rng.IntN(6)-3))
				m[j][i] = m[i][j]
			}
		}
		mats = append(mats, m)
	}
	for _, m := range mats {
		var e [3]float64
		var v [3][3]float64
		symEig3(&m, &e, &v)
		var norm float64
		for i := range 3 {
			for j := range 3 {
				norm = math.Max(norm, math.Abs(m[i][j]))
			}
		}
		for k := range 3 {
			for i := range 3 {
				hv := m[i][0]*v[0][k] + m[i][1]*v[1][k] + m[i][2]*v[2][k]
				if d := math.Abs(hv - e[k]*v[i][k]); d > 1e-14*norm+1e-300 {
					t.Fatalf("%v: residual %.2e for eigenpair %d", m, d, k)
				}
			}
			for l := range 3 {
				dot := v[0][k]*v[0][l] + v[1][k]*v[1][l] + v[2][k]*v[2][l]
				want := 0.0
				if k == l {
					want = 1
				}
				if math.Abs(dot-want) > 1e-14 {
					t.Fatalf("%v: vᵀv[%d][%d] = %g", m, k, l, dot)
				}
			}
		}
	}
}

func TestValidate(t *testing.T) {
	for _, tc := range []struct {
		b     Bath
		field string
	}{
		{Bath{AlphaPS2: -1, CutoffMeV: 1, TemperatureK: 4}, "alpha_ps2"},
		{Bath{AlphaPS2: math.NaN(), CutoffMeV: 1, TemperatureK: 4}, "alpha_ps2"},
		{Bath{AlphaPS2: 0.03, CutoffMeV: 0, TemperatureK: 4}, "cutoff_mev"},
		{Bath{AlphaPS2: 0.03, CutoffMeV: 1, TemperatureK: -1}, "temperature_k"},
		{Bath{AlphaPS2: 0.03, CutoffMeV: 1, TemperatureK: math.Inf(1)}, "temperature_k"},
	} {
		err := tc.b.Validate()
		if err == nil || !strings.Contains(err.Error(), tc.field) {
			t.Errorf("%+v: error %v, want one naming %s", tc.b, err, tc.field)
		}
		if _, err := Solve(model.DemoParams(), &tc.b); err == nil && tc.b.AlphaPS2 != 0 {
			t.Errorf("%+v: Solve accepted an invalid bath", tc.b)
		}
	}
	d := DemoBath()
	if err := d.Validate(); err != nil {
		t.Errorf("demo bath: %v", err)
	}
}

// TestMapDeterministic: the map is the same with one and two workers and
// equals point-by-point Solve.
func TestMapDeterministic(t *testing.T) {
	b := DemoBath()
	gdd := []float64{-20, 0, 20}
	areas := []float64{2, 7}
	one, err := MapWorkers(context.Background(), model.DemoParams(), &b, gdd, model.AxisAreaPi, areas, 1, nil)
	if err != nil {
		t.Fatal(err)
	}
	two, err := MapWorkers(context.Background(), model.DemoParams(), &b, gdd, model.AxisAreaPi, areas, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := range one {
		if one[i] != two[i] {
			t.Errorf("point %d: %+v with 1 worker, %+v with 2", i, one[i], two[i])
		}
		p := model.DemoParams()
		p.GDDPS2, p.AreaPi = one[i].GDDPS2, one[i].AreaPi
		r, _ := Solve(p, &b)
		if r != one[i].Result {
			t.Errorf("point %d: map %+v, Solve %+v", i, one[i].Result, r)
		}
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := Map(ctx, model.DemoParams(), &b, gdd, model.AxisAreaPi, areas, nil); err == nil {
		t.Error("cancelled map returned no error")
	}
}

// TestSecularFastPath: the direct Pauli-plus-dephasing evaluation equals the
// secular rule written out whenever no transition frequencies coincide, and
// an equidistant spectrum does couple the coherences ρ01 and ρ12.
func TestSecularFastPath(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	b := Bath{AlphaPS2: 0.04, CutoffMeV: 1.3, TemperatureK: 9}
	sp := newSpectrum(&b)
	for n := 0; n < 500; n++ {
		var h, v [3][3]float64
		var e [3]float64
		h[1][1], h[2][2] = 4*rng.NormFloat64(), 4*rng.NormFloat64()
		h[0][1], h[1][2] = rng.NormFloat64(), rng.NormFloat64()
		h[1][0], h[2][1] = h[0][1], h[1][2]
		symEig3(&h, &e, &v)
		var a, g [3][3]float64
		for i := range 3 {
			for j := range 3 {
				a[i][j] = v[1][i]*v[1][j] + 2*v[2][i]*v[2][j]
			}
		}
		g[0][1], g[1][0] = sp.pair(e[0] - e[1])
		g[0][2], g[2][0] = sp.pair(e[0] - e[2])
		g[1][2], g[2][1] = sp.pair(e[1] - e[2])
		dw := math.Min(math.Abs(e[0]-e[1]), math.Min(math.Abs(e[0]-e[2]), math.Abs(e[1]-e[2])))
		cut := SecularCutoff * dw
		if nearCoincidence(&e, cut) {
			continue
		}
		var rho [3][3]complex128
		for i := range 3 {
			rho[i][i] = complex(rng.Float64(), 0)
			for j := i + 1; j < 3; j++ {
				rho[i][j] = complex(rng.NormFloat64(), rng.NormFloat64())
				rho[j][i] = conj(rho[i][j])
			}
		}
		var fast, slow [3][3]complex128
		pauliAndDephasing(&a, &g, &rho, &fast)
		secularLoop(&e, &a, &g, cut, &rho, &slow)
		for i := range 3 {
			for j := range 3 {
				if d := cmplxAbs(fast[i][j] - slow[i][j]); d > 1e-13 {
					t.Fatalf("element %d%d: fast %v, rule %v", i, j, fast[i][j], slow[i][j])
				}
			}
		}
	}
	// Equidistant levels: ω01 = ω12, so ρ12 feeds dρ01.
	e := [3]float64{-1, 0, 1}
	var a, g [3][3]float64
	a = [3][3]float64{{0.5, 0.3, 0.1}, {0.3, 1, 0.4}, {0.1, 0.4, 1.5}}
	g[0][1], g[1][0] = sp.pair(-1)
	g[0][2], g[2][0] = sp.pair(-2)
	g[1][2], g[2][1] = sp.pair(-1)
	if !nearCoincidence(&e, 0.1) {
		t.Fatal("equidistant spectrum not detected")
	}
	var rho, out [3][3]complex128
	rho[1][2], rho[2][1] = 1, 1
	secularLoop(&e, &a, &g, 0.1, &rho, &out)
	if out[0][1] == 0 {
		t.Error("equidistant spectrum: ρ12 does not feed dρ01")
	}
}

func cmplxAbs(z complex128) float64 { return math.Hypot(real(z), imag(z)) }

// TestNoAllocationPerStep: a point allocates a fixed handful of objects (the
// problem's setup), not per step: a point with ~3× the steps allocates the
// same number.
func TestNoAllocationPerStep(t *testing.T) {
	s := NewSolver()
	b := DemoBath()
	short, long := demoAt(2, 3), demoAt(25, 12)
	as := testing.AllocsPerRun(3, func() { s.Solve(short, &b) })
	stepsShort := s.steps
	al := testing.AllocsPerRun(3, func() { s.Solve(long, &b) })
	if s.steps < 2*stepsShort {
		t.Fatalf("steps %d and %d: the long point is not long", stepsShort, s.steps)
	}
	if al != as || al > 10 {
		t.Errorf("allocations per point: %v (%d steps) and %v (%d steps), want equal and ≤ 10", as, stepsShort, al, s.steps)
	}
}
