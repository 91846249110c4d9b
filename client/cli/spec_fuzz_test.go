package cli

import (
	"testing"

	"google.golang.org/protobuf/encoding/protojson"
)

// FuzzDecodeSpec: the spec decoder of `gliss scan submit` never panics, and
// what it accepts survives a round trip through protobuf JSON.
func FuzzDecodeSpec(f *testing.F) {
	f.Add([]byte(`{"name":"rabi","axes":[{"kind":"AXIS_KIND_POWER_UW","range":{"from":0.05,"to":50,"count":101},"spacing":"POWER_SPACING_AMPLITUDE"}],"gateMs":200}`))
	f.Add([]byte(`{"axes":[{"kind":"AXIS_KIND_GDD_PS2","list":{"values":[-20,0,20]}}],"gateMs":10,"snake":true,"fixed":[{"kind":"AXIS_KIND_POWER_UW","value":25}]}`))
	f.Add([]byte(`{"unknown":1}`))
	f.Add([]byte(`{"gateMs":"NaN","temperatureToleranceK":0}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		spec, err := DecodeSpec(data)
		if err != nil {
			return
		}
		b, err := protojson.Marshal(spec)
		if err != nil {
			t.Fatalf("accepted spec does not marshal: %v", err)
		}
		again, err := DecodeSpec(b)
		if err != nil {
			t.Fatalf("round trip of %s: %v", b, err)
		}
		if again.GetName() != spec.GetName() || len(again.GetAxes()) != len(spec.GetAxes()) {
			t.Fatalf("round trip changed the spec: %v → %v", spec, again)
		}
	})
}

func TestDecodeSpecRejects(t *testing.T) {
	for _, in := range []string{`{"unknown":1}`, `not json`, `{"axes":[{"kind":"NOPE"}]}`} {
		if _, err := DecodeSpec([]byte(in)); err == nil {
			t.Errorf("%s: accepted", in)
		}
	}
}
