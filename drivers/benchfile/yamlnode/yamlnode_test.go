package yamlnode

import (
	"strings"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"
)

type inner struct {
	Rate map[string]float64 `bench:"rate"`
}

type sample struct {
	Name    string        `bench:"name,required"`
	N       int           `bench:"n"`
	U       uint8         `bench:"u"`
	X       float64       `bench:"x"`
	On      bool          `bench:"on"`
	Wait    time.Duration `bench:"wait"`
	List    []string      `bench:"list"`
	In      *inner        `bench:"in"`
	Raw     *yaml.Node    `bench:"raw"`
	Legacy  string        `yaml:"legacy"`
	private string
}

func decode(t *testing.T, text string) (sample, error) {
	t.Helper()
	var n yaml.Node
	if err := yaml.Unmarshal([]byte(text), &n); err != nil {
		t.Fatal(err)
	}
	d := &Decoder{File: "f.yaml"}
	var s sample
	d.Decode(&n, "", &s)
	return s, d.Err()
}

func TestDecodeGood(t *testing.T) {
	s, err := decode(t, "name: a\nn: -3\nu: 200\nx: 1e-3\non: true\nwait: 250ms\nlist: [p, q]\nin: {rate: {x: 2}}\nraw: {anything: [1]}\nlegacy: old\n")
	if err != nil {
		t.Fatal(err)
	}
	if s.Name != "a" || s.N != -3 || s.U != 200 || s.X != 1e-3 || !s.On || s.Wait != 250*time.Millisecond ||
		len(s.List) != 2 || s.In.Rate["x"] != 2 || s.Raw == nil || s.Raw.Line != 9 || s.Legacy != "old" {
		t.Fatalf("%+v", s)
	}
}

func TestDecodeErrors(t *testing.T) {
	for _, c := range []struct{ text, want string }{
		{"n: 1\n", "f.yaml:1: key name: missing (required)"},
		{"name: a\nbogus: 1\n", "f.yaml:2: key bogus: unknown key (allowed here: name, n, u, x, on, wait, list, in, raw, legacy)"},
		{"name: a\nn: 1.5\n", "f.yaml:2: key n: want an integer, got number 1.5"},
		{"name: a\nu: 300\n", "f.yaml:2: key u: want an integer ≥ 0, got integer 300"},
		{"name: a\nx: .nan\n", "f.yaml:2: key x: want a finite number"},
		{"name: a\non: yes\n", "f.yaml:2: key on: want true or false"},
		{"name: a\nwait: 5\n", "f.yaml:2: key wait: want a duration"},
		{"name: a\nwait: -1s\n", "f.yaml:2: key wait: want a duration ≥ 0"},
		{"name: a\nlist: p\n", "f.yaml:2: key list: want a list"},
		{"name: a\nin: {rate: {x: 1, x: 2}}\n", "key in.rate.x: given twice"},
		{"name: a\nname: b\n", "f.yaml:2: key name: given twice"},
		{"name: 7\n", "f.yaml:1: key name: want a string, got integer 7 (quote it)"},
		{"name: &n a\nlegacy: *n\n", "f.yaml:2: key legacy: aliases are not allowed"},
		{"private: x\nname: a\n", "f.yaml:1: key private: unknown key"},
	} {
		_, err := decode(t, c.text)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%q: error %v; want %q", c.text, err, c.want)
		}
	}
}
