package rpc

import (
	"fmt"
	"sync"

	"google.golang.org/grpc"
	"google.golang.org/grpc/encoding"
	"google.golang.org/grpc/mem"
	"google.golang.org/protobuf/proto"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

// Many watchers of one scan receive the same point events. Encoding each
// event once, instead of once per watcher, keeps the watchers' CPU off the
// scan's back on a small machine: the server's codec passes pre-encoded
// events through unchanged and encodes everything else as usual.

// preEncoded is a message already in protobuf wire form.
type preEncoded struct{ b []byte }

// passThroughCodec is the proto codec, except that it sends preEncoded as is.
type passThroughCodec struct{ base encoding.CodecV2 }

func (c passThroughCodec) Marshal(v any) (mem.BufferSlice, error) {
	if p, ok := v.(*preEncoded); ok {
		return mem.BufferSlice{mem.SliceBuffer(p.b)}, nil
	}
	return c.base.Marshal(v)
}

func (c passThroughCodec) Unmarshal(data mem.BufferSlice, v any) error {
	return c.base.Unmarshal(data, v)
}

func (c passThroughCodec) Name() string { return c.base.Name() }

// ServerCodec is the server option that lets WatchScan share encodings.
func ServerCodec() (grpc.ServerOption, error) {
	base := encoding.GetCodecV2("proto")
	if base == nil {
		return nil, fmt.Errorf("rpc: no proto codec registered")
	}
	return grpc.ForceServerCodecV2(passThroughCodec{base: base}), nil
}

// eventCache holds the encoded point events of the scans being watched, a
// fixed ring per scan indexed by sequence number.
type eventCache struct {
	mu    sync.Mutex
	scans map[string]*scanEvents
}

const eventRing = 8192

type scanEvents struct {
	watchers int
	seqPlus1 [eventRing]uint64 // seq+1 of the event in each slot (0: empty)
	enc      [eventRing][]byte
}

func (c *eventCache) join(id string) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.scans == nil {
		c.scans = map[string]*scanEvents{}
	}
	s := c.scans[id]
	if s == nil {
		s = &scanEvents{}
		c.scans[id] = s
	}
	s.watchers++
}

func (c *eventCache) leave(id string) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if s := c.scans[id]; s != nil {
		if s.watchers--; s.watchers <= 0 {
			delete(c.scans, id)
		}
	}
}

// encoded returns the wire form of a point event, encoding it at most once
// while it stays in the ring.
func (c *eventCache) encoded(p *glissv1.Point) ([]byte, error) {
	i := p.GetSeq() % eventRing
	c.mu.Lock()
	s := c.scans[p.GetScanId()]
	if s != nil && s.seqPlus1[i] == p.GetSeq()+1 {
		b := s.enc[i]
		c.mu.Unlock()
		return b, nil
	}
	c.mu.Unlock()
	b, err := proto.Marshal(&glissv1.ScanEvent{Event: &glissv1.ScanEvent_Point{Point: p}})
	if err != nil {
		return nil, err
	}
	c.mu.Lock()
	if s := c.scans[p.GetScanId()]; s != nil {
		s.seqPlus1[i], s.enc[i] = p.GetSeq()+1, b
	}
	c.mu.Unlock()
	return b, nil
}
