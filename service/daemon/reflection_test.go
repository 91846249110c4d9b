package daemon_test

import (
	"context"
	"slices"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	rpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protodesc"
	"google.golang.org/protobuf/reflect/protoreflect"
	"google.golang.org/protobuf/reflect/protoregistry"
	"google.golang.org/protobuf/types/descriptorpb"

	"github.com/gliss-lab/gliss/service/daemon"
)

// TestReflection: a generic client that knows nothing of gliss's protos
// (only the gRPC server reflection protocol, grpc.reflection.v1) lists the
// services and describes a message from the descriptors the daemon serves,
// which is what command-line gRPC tools do.
func TestReflection(t *testing.T) {
	d, _ := startDaemon(t, daemon.Config{SimInstant: true})
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	conn, err := grpc.NewClient(d.Addr(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	stream, err := rpb.NewServerReflectionClient(conn).ServerReflectionInfo(ctx)
	if err != nil {
		t.Fatal(err)
	}
	ask := func(req *rpb.ServerReflectionRequest) *rpb.ServerReflectionResponse {
		t.Helper()
		if err := stream.Send(req); err != nil {
			t.Fatal(err)
		}
		resp, err := stream.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if e := resp.GetErrorResponse(); e != nil {
			t.Fatalf("reflection error %d: %s", e.ErrorCode, e.ErrorMessage)
		}
		return resp
	}

	// List services.
	resp := ask(&rpb.ServerReflectionRequest{MessageRequest: &rpb.ServerReflectionRequest_ListServices{ListServices: ""}})
	var names []string
	for _, s := range resp.GetListServicesResponse().GetService() {
		names = append(names, s.Name)
	}
	for _, want := range []string{"gliss.v1.ScanService", "gliss.v1.BenchService", "grpc.health.v1.Health", "grpc.reflection.v1.ServerReflection"} {
		if !slices.Contains(names, want) {
			t.Errorf("services %v lack %s", names, want)
		}
	}

	// Fetch the file that defines ScanService, with its dependencies, and
	// build descriptors from the served bytes alone (a fresh registry, not
	// the compiled-in one).
	files := new(protoregistry.Files)
	fetched := map[string]*descriptorpb.FileDescriptorProto{}
	var fetch func(req *rpb.ServerReflectionRequest)
	fetch = func(req *rpb.ServerReflectionRequest) {
		for _, b := range ask(req).GetFileDescriptorResponse().GetFileDescriptorProto() {
			fd := &descriptorpb.FileDescriptorProto{}
			if err := proto.Unmarshal(b, fd); err != nil {
				t.Fatal(err)
			}
			if _, ok := fetched[fd.GetName()]; ok {
				continue
			}
			fetched[fd.GetName()] = fd
			for _, dep := range fd.GetDependency() {
				if _, ok := fetched[dep]; !ok {
					fetch(&rpb.ServerReflectionRequest{MessageRequest: &rpb.ServerReflectionRequest_FileByFilename{FileByFilename: dep}})
				}
			}
		}
	}
	fetch(&rpb.ServerReflectionRequest{MessageRequest: &rpb.ServerReflectionRequest_FileContainingSymbol{FileContainingSymbol: "gliss.v1.ScanService"}})
	// Register in dependency order.
	var register func(name string)
	register = func(name string) {
		if _, err := files.FindFileByPath(name); err == nil {
			return
		}
		fd := fetched[name]
		if fd == nil {
			t.Fatalf("dependency %s not served", name)
		}
		for _, dep := range fd.GetDependency() {
			register(dep)
		}
		f, err := protodesc.NewFile(fd, files)
		if err != nil {
			t.Fatalf("file %s: %v", name, err)
		}
		if err := files.RegisterFile(f); err != nil {
			t.Fatal(err)
		}
	}
	for name := range fetched {
		register(name)
	}

	svc, err := files.FindDescriptorByName("gliss.v1.ScanService")
	if err != nil {
		t.Fatal(err)
	}
	methods := svc.(protoreflect.ServiceDescriptor).Methods()
	for _, m := range []string{"SubmitScan", "GetScan", "ListScans", "WatchScan", "ReadPoints", "PauseScan", "ResumeScan", "CancelScan"} {
		if methods.ByName(protoreflect.Name(m)) == nil {
			t.Errorf("ScanService lacks %s", m)
		}
	}
	if w := methods.ByName("WatchScan"); w == nil || !w.IsStreamingServer() || w.Output().FullName() != "gliss.v1.ScanEvent" {
		t.Errorf("WatchScan: %v", w)
	}

	// Describe gliss.v1.ScanSpec: field names, numbers and kinds as in scan.proto.
	md, err := files.FindDescriptorByName("gliss.v1.ScanSpec")
	if err != nil {
		t.Fatal(err)
	}
	fields := md.(protoreflect.MessageDescriptor).Fields()
	for _, want := range []struct {
		name string
		num  protoreflect.FieldNumber
		kind protoreflect.Kind
		list bool
	}{
		{"name", 1, protoreflect.StringKind, false},
		{"axes", 2, protoreflect.MessageKind, true},
		{"snake", 3, protoreflect.BoolKind, false},
		{"gate_ms", 4, protoreflect.DoubleKind, false},
		{"settle_ms", 5, protoreflect.DoubleKind, false},
		{"fixed", 6, protoreflect.MessageKind, true},
	} {
		f := fields.ByName(protoreflect.Name(want.name))
		if f == nil {
			t.Errorf("ScanSpec lacks field %s", want.name)
			continue
		}
		if f.Number() != want.num || f.Kind() != want.kind || f.IsList() != want.list {
			t.Errorf("ScanSpec.%s: number %d kind %v list %v, want %d %v %v", want.name, f.Number(), f.Kind(), f.IsList(), want.num, want.kind, want.list)
		}
	}
	if ax := fields.ByName("axes"); ax != nil && ax.Message().FullName() != "gliss.v1.Axis" {
		t.Errorf("ScanSpec.axes is %s, want gliss.v1.Axis", ax.Message().FullName())
	}
	// An enum is described too, with its values.
	ek, err := files.FindDescriptorByName("gliss.v1.AxisKind")
	if err != nil {
		t.Fatal(err)
	}
	if v := ek.(protoreflect.EnumDescriptor).Values().ByName("AXIS_KIND_GDD_PS2"); v == nil || v.Number() != 1 {
		t.Errorf("AxisKind.AXIS_KIND_GDD_PS2: %v", v)
	}

	// Unknown symbols are NotFound errors, not empty answers.
	if err := stream.Send(&rpb.ServerReflectionRequest{MessageRequest: &rpb.ServerReflectionRequest_FileContainingSymbol{FileContainingSymbol: "gliss.v1.NoSuchThing"}}); err != nil {
		t.Fatal(err)
	}
	r, err := stream.Recv()
	if err != nil || r.GetErrorResponse() == nil {
		t.Errorf("unknown symbol: %v, %v", r, err)
	}
	stream.CloseSend()
}
