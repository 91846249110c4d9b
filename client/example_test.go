package client_test

import (
	"context"
	"fmt"
	"log"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"time"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/client/npy"
	"github.com/gliss-lab/gliss/service/daemon"
)

// exampleDaemon starts a glissd on the simulated bench (instruments that
// take no time) for the examples; in the lab it runs as its own process
// and the examples dial client.DefaultAddr.
func exampleDaemon() (addr string, stop func()) {
	dir, err := os.MkdirTemp("", "gliss-example-")
	if err != nil {
		log.Fatal(err)
	}
	d, err := daemon.Start(context.Background(), daemon.Config{
		Listen: "127.0.0.1:0", DataDir: dir, SimSeed: 1, SimInstant: true,
		Logger: slog.New(slog.DiscardHandler),
	})
	if err != nil {
		log.Fatal(err)
	}
	return d.Addr(), func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		d.Stop(ctx)
		os.RemoveAll(dir)
	}
}

// A power × chirp map: submit it, follow it to the end, count the points.
func Example() {
	addr, stop := exampleDaemon()
	defer stop()
	ctx := context.Background()

	c, err := client.Dial(ctx, addr)
	if err != nil {
		log.Fatal(err)
	}
	defer c.Close()
	spec := client.MapSpec(client.Range(-20, 20, 5), client.Range(0.05, 64, 9),
		client.Options{Name: "first map", GateMS: 100, Snake: true, AmplitudeSpacing: true})
	sc, err := c.Submit(ctx, spec)
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println("planned points:", sc.GetPreview().GetPoints())
	points := 0
	var last *glissv1.Scan
	for ev, err := range c.Watch(ctx, sc.Id, 0) {
		if err != nil {
			log.Fatal(err)
		}
		switch e := ev.Event.(type) {
		case *glissv1.ScanEvent_Point:
			points++
		case *glissv1.ScanEvent_Scan:
			last = e.Scan
		}
	}
	fmt.Println("points received:", points)
	fmt.Println("final state:", last.State)
	// Output:
	// planned points: 45
	// points received: 45
	// final state: SCAN_STATE_SUCCEEDED
}

// Dial checks through gRPC health that glissd serves; a daemon that is not
// there is an error that says how to start one.
func ExampleDial() {
	addr, stop := exampleDaemon()
	defer stop()
	ctx := context.Background()
	c, err := client.Dial(ctx, addr)
	if err != nil {
		log.Fatal(err)
	}
	c.Close()
	fmt.Println("connected")

	_, err = client.Dial(ctx, "127.0.0.1:1", client.WithHealthTimeout(200*time.Millisecond))
	fmt.Println(strings.Contains(err.Error(), "start it with `glissd --data DIR`"))
	// Output:
	// connected
	// true
}

// A Rabi curve: a power sweep spaced linearly in pulse area at zero chirp.
func ExamplePowerSpec() {
	spec := client.PowerSpec(client.Range(0.05, 50, 101), client.Options{
		GateMS: 500, AmplitudeSpacing: true,
		Fixed: []*glissv1.Setpoint{client.Fixed(glissv1.AxisKind_AXIS_KIND_GDD_PS2, 0)},
	})
	a := spec.Axes[0]
	fmt.Println(a.Kind, a.GetRange().GetCount(), a.Spacing)
	fmt.Println(spec.Fixed[0].Kind, spec.Fixed[0].Value, spec.GateMs)
	// Output:
	// AXIS_KIND_POWER_UW 101 POWER_SPACING_AMPLITUDE
	// AXIS_KIND_GDD_PS2 0 500
}

// Points reads a finished scan's stored points; WriteCSV streams them.
func ExampleWriteCSV() {
	addr, stop := exampleDaemon()
	defer stop()
	ctx := context.Background()
	c, err := client.Dial(ctx, addr)
	if err != nil {
		log.Fatal(err)
	}
	defer c.Close()
	sc, err := c.Submit(ctx, client.ChirpSpec(client.List(-10, 0, 10), client.Options{GateMS: 50,
		Fixed: []*glissv1.Setpoint{client.Fixed(glissv1.AxisKind_AXIS_KIND_POWER_UW, 4)}}))
	if err != nil {
		log.Fatal(err)
	}
	for _, err := range c.Watch(ctx, sc.Id, 0) { // wait for the end
		if err != nil {
			log.Fatal(err)
		}
	}
	sc, _ = c.Get(ctx, sc.Id)
	var b strings.Builder
	n, err := client.WriteCSV(&b, sc, c.Points(ctx, sc.Id, 0))
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println(n, "points")
	fmt.Println(strings.SplitN(b.String(), "\n", 2)[0])
	// Output:
	// 3 points
	// seq,gdd_ps2,stage_mm,power_uw,angle_deg,measured_power_uw,measured_temperature_k,counts_x,counts_xx,gate_ms,started_at,finished_at
}

// WriteNPY saves a scan as NumPy arrays: the axis vectors and one array of
// counts per channel shaped by the axes (numpy.load("map.npz")["counts_xx"]).
func ExampleWriteNPY() {
	addr, stop := exampleDaemon()
	defer stop()
	ctx := context.Background()
	c, err := client.Dial(ctx, addr)
	if err != nil {
		log.Fatal(err)
	}
	defer c.Close()
	sc, err := c.Submit(ctx, client.MapSpec(client.Range(-20, 20, 3), client.Range(1, 16, 4), client.Options{GateMS: 100}))
	if err != nil {
		log.Fatal(err)
	}
	for _, err := range c.Watch(ctx, sc.Id, 0) {
		if err != nil {
			log.Fatal(err)
		}
	}
	sc, _ = c.Get(ctx, sc.Id)
	dir, _ := os.MkdirTemp("", "gliss-npz-")
	defer os.RemoveAll(dir)
	f, err := os.Create(filepath.Join(dir, "map.npz"))
	if err != nil {
		log.Fatal(err)
	}
	defer f.Close()
	n, err := client.WriteNPY(npy.NewNPZ(f), sc, c.Points(ctx, sc.Id, 0))
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println(n, "points")

	// The same arrays in memory.
	g, err := client.NewGrid(sc, c.Points(ctx, sc.Id, 0))
	if err != nil {
		log.Fatal(err)
	}
	fmt.Println(g.Axes, g.Shape, g.Channels, g.AxisValues[1])
	// Output:
	// 12 points
	// [gdd_ps2 power_uw] [3 4] [x xx] [1 6 11 16]
}
