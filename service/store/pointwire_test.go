package store

import (
	"bytes"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protoreflect"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// The fields appendPointWire writes, by message. A field added to one of
// these messages in the .proto fails TestPointWireKnowsEveryField until the
// encoder writes it too.
var pointWireFields = map[protoreflect.FullName][]protoreflect.FieldNumber{
	"gliss.v1.Point":            {1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11},
	"gliss.v1.Commanded":        {1, 2, 3, 4, 5, 6},
	"google.protobuf.Timestamp": {1, 2},
}

func TestPointWireKnowsEveryField(t *testing.T) {
	for _, m := range []proto.Message{&glissv1.Point{}, &glissv1.Commanded{}, &timestamppb.Timestamp{}} {
		d := m.ProtoReflect().Descriptor()
		var have []protoreflect.FieldNumber
		for i := range d.Fields().Len() {
			have = append(have, d.Fields().Get(i).Number())
		}
		slices.Sort(have)
		if want := pointWireFields[d.FullName()]; !slices.Equal(have, want) {
			t.Errorf("%s has fields %v; appendPointWire writes %v", d.FullName(), have, want)
		}
	}
}

// randomFloat draws the values that encode differently: 0, -0, NaN, ±Inf,
// tiny and huge numbers, ordinary ones.
func randomFloat(r *rand.Rand) float64 {
	switch r.IntN(8) {
	case 0:
		return 0
	case 1:
		return math.Copysign(0, -1)
	case 2:
		return math.NaN()
	case 3:
		return math.Inf(1 - 2*r.IntN(2))
	case 4:
		return math.SmallestNonzeroFloat64
	default:
		return (r.Float64() - 0.5) * math.Pow(10, float64(r.IntN(40)-20))
	}
}

func optFloat(r *rand.Rand) *float64 {
	if r.IntN(3) == 0 {
		return nil
	}
	return proto.Float64(randomFloat(r))
}

func randomStamp(r *rand.Rand) *timestamppb.Timestamp {
	if r.IntN(4) == 0 {
		return nil
	}
	secs := []int64{0, -1, 1, 1_790_000_000, math.MinInt64, math.MaxInt64, r.Int64()}[r.IntN(7)]
	nanos := []int32{0, -1, 999_999_999, math.MinInt32, r.Int32()}[r.IntN(5)]
	return &timestamppb.Timestamp{Seconds: secs, Nanos: nanos}
}

func randomPoint(r *rand.Rand) *glissv1.Point {
	p := &glissv1.Point{
		ScanId:          []string{"", "01JD0000000000000000000000", "ü/\x00"}[r.IntN(3)],
		Seq:             []uint64{0, 1, 127, 128, math.MaxUint64, r.Uint64()}[r.IntN(6)],
		MeasuredPowerUw: optFloat(r),
		GateMs:          randomFloat(r),
		StartedAt:       randomStamp(r),
		FinishedAt:      randomStamp(r),
		TemperatureK:    optFloat(r),
	}
	for range r.IntN(4) {
		p.Index = append(p.Index, []uint32{0, 1, 300, math.MaxUint32, r.Uint32()}[r.IntN(5)])
		p.Values = append(p.Values, randomFloat(r))
	}
	for range r.IntN(4) {
		p.Counts = append(p.Counts, []uint64{0, 5, 1 << 40, math.MaxUint64}[r.IntN(4)])
	}
	if r.IntN(4) > 0 {
		p.Commanded = &glissv1.Commanded{
			StageMm: optFloat(r), GddPs2: optFloat(r), AngleDeg: optFloat(r),
			PowerUw: optFloat(r), DetuningMev: optFloat(r), TemperatureK: optFloat(r),
		}
	}
	return p
}

// The reference is protobuf-go itself: proto.MarshalOptions{Deterministic:
// true}, the encoder the store used before (its bytes are what the stored
// records of earlier versions hold).
func TestPointWireMatchesProtoMarshal(t *testing.T) {
	r := rand.New(rand.NewPCG(1, 2))
	pts := []*glissv1.Point{{}, testPoint("01P", 0), testPoint("01P", 12345), {Commanded: &glissv1.Commanded{}, StartedAt: &timestamppb.Timestamp{}}}
	for range 20000 {
		pts = append(pts, randomPoint(r))
	}
	for i, p := range pts {
		want, err := marshalOpts.Marshal(p)
		if err != nil {
			t.Fatal(err)
		}
		prefix := []byte("kept")
		got, ok := appendPointWire(slices.Clone(prefix), p)
		if !ok {
			t.Fatalf("point %d: encoder declined a point without unknown fields", i)
		}
		if !bytes.HasPrefix(got, prefix) || !bytes.Equal(got[len(prefix):], want) {
			t.Fatalf("point %d (%v):\n got %x\nwant %x", i, p, got[len(prefix):], want)
		}
	}
}

// Unknown fields (a record written by a newer gliss, read and stored again)
// are not the encoder's business: it declines, and the store falls back to
// proto.Marshal, which keeps them.
func TestPointWireDeclinesUnknownFields(t *testing.T) {
	extra := protowire.AppendTag(nil, 99, protowire.VarintType)
	extra = protowire.AppendVarint(extra, 7)
	for name, set := range map[string]func(p *glissv1.Point){
		"point":       func(p *glissv1.Point) { p.ProtoReflect().SetUnknown(extra) },
		"commanded":   func(p *glissv1.Point) { p.Commanded.ProtoReflect().SetUnknown(extra) },
		"finished_at": func(p *glissv1.Point) { p.FinishedAt.ProtoReflect().SetUnknown(extra) },
	} {
		p := testPoint("01U", 3)
		set(p)
		if out, ok := appendPointWire([]byte("x"), p); ok || string(out) != "x" {
			t.Errorf("%s: unknown fields: ok %v, %d bytes appended", name, ok, len(out)-1)
		}
	}
}

// FuzzPointWire: any field values give protobuf's bytes.
func FuzzPointWire(f *testing.F) {
	f.Add("01P", uint64(5), uint32(3), 1.5, math.Copysign(0, -1), uint64(900), int64(1_790_000_000), int32(-1), true)
	f.Add("", uint64(0), uint32(0), 0.0, 0.0, uint64(0), int64(0), int32(0), false)
	f.Fuzz(func(t *testing.T, id string, seq uint64, idx uint32, v, g float64, n uint64, secs int64, nanos int32, set bool) {
		p := &glissv1.Point{ScanId: id, Seq: seq, Index: []uint32{idx}, Values: []float64{v}, GateMs: g,
			Counts: []uint64{n, n >> 3}, StartedAt: &timestamppb.Timestamp{Seconds: secs, Nanos: nanos}}
		if set {
			p.Commanded = &glissv1.Commanded{GddPs2: proto.Float64(v), TemperatureK: proto.Float64(g)}
			p.MeasuredPowerUw = proto.Float64(g)
		}
		want, err := marshalOpts.Marshal(p)
		got, ok := appendPointWire(nil, p)
		if err != nil { // invalid UTF-8 in scan_id: the encoder must leave it to proto.Marshal's error
			if ok {
				t.Fatalf("proto.Marshal refuses the point (%v), the encoder wrote %x", err, got)
			}
			return
		}
		if !ok || !bytes.Equal(got, want) {
			t.Fatalf("got %x (ok %v), want %x", got, ok, want)
		}
	})
}

func BenchmarkEncodePoint(b *testing.B) {
	p := testPoint("01JD0000000000000000000000", 4242)
	buf := make([]byte, 0, 256)
	b.Run("appendPointWire", func(b *testing.B) {
		for b.Loop() {
			buf, _ = appendPointWire(buf[:0], p)
		}
	})
	b.Run("proto.MarshalAppend", func(b *testing.B) {
		for b.Loop() {
			buf, _ = marshalOpts.MarshalAppend(buf[:0], p)
		}
	})
}
