package server

import (
	"fmt"
	"sync"
	"unicode/utf8"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/encoding"
	encproto "google.golang.org/grpc/encoding/proto"
	"google.golang.org/grpc/mem"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protoreflect"
)

// RequestCodec returns the server option that makes a request that does not
// decode (malformed wire data, a string field that is not UTF-8) answer
// InvalidArgument naming the field, where grpc-go would answer Internal
// whatever the codec returned. The codec decodes with the proto codec and
// remembers a request it could not decode, emptied; the server's
// UnaryInterceptor and StreamInterceptor refuse that request before
// authentication or any handler sees it, so install the three together.
func (s *Server) RequestCodec() grpc.ServerOption {
	return grpc.ForceServerCodecV2(&s.requests)
}

// requestCodec is the proto codec, remembering the requests it could not
// decode until the interceptors refuse them. It is safe for concurrent use.
type requestCodec struct {
	failed sync.Map // request message -> its InvalidArgument status error
}

var protoCodec = encoding.GetCodecV2(encproto.Name)

func (c *requestCodec) Name() string { return encproto.Name }

func (c *requestCodec) Marshal(v any) (mem.BufferSlice, error) { return protoCodec.Marshal(v) }

func (c *requestCodec) Unmarshal(data mem.BufferSlice, v any) error {
	err := protoCodec.Unmarshal(data, v)
	if err == nil {
		return nil
	}
	m, ok := v.(proto.Message)
	if !ok {
		return err
	}
	field, problem := malformed(m.ProtoReflect().Descriptor(), data.Materialize(), err)
	c.failed.Store(v, statusError(codes.InvalidArgument, reasonInvalidArgument, field, "", problem))
	proto.Reset(m)
	return nil
}

// refuse returns the InvalidArgument error of a request that did not
// decode, once, and nil for any other.
func (c *requestCodec) refuse(req any) error {
	if err, ok := c.failed.LoadAndDelete(req); ok {
		return err.(error)
	}
	return nil
}

// stream returns ss with every received request checked by refuse.
func (c *requestCodec) stream(ss grpc.ServerStream) grpc.ServerStream {
	return checkedStream{ServerStream: ss, c: c}
}

type checkedStream struct {
	grpc.ServerStream
	c *requestCodec
}

func (s checkedStream) RecvMsg(m any) error {
	if err := s.ServerStream.RecvMsg(m); err != nil {
		return err
	}
	return s.c.refuse(m)
}

// malformed says where b fails to decode as a message of type d: the path
// of the field ("request" when the fault lies outside any field) and what
// is wrong with it, err when nothing more precise is found.
func malformed(d protoreflect.MessageDescriptor, b []byte, err error) (field, problem string) {
	path, problem := locate(d, b)
	switch {
	case problem != "" && path != "":
		return path, problem
	case problem != "":
		return "request", problem
	}
	return "request", fmt.Sprintf("malformed protobuf: %v", err)
}

// locate finds the first field of b, read as a message of type d, that
// does not decode: its dotted path and the problem, or "" for both.
func locate(d protoreflect.MessageDescriptor, b []byte) (path, problem string) {
	for len(b) > 0 {
		num, typ, n := protowire.ConsumeTag(b)
		if n < 0 {
			return "", "malformed wire data: " + protowire.ParseError(n).Error()
		}
		b = b[n:]
		fd := d.Fields().ByNumber(num)
		name := fmt.Sprintf("field %d", num)
		if fd != nil {
			name = string(fd.Name())
		}
		n = protowire.ConsumeFieldValue(num, typ, b)
		if n < 0 {
			return name, "malformed wire data: " + protowire.ParseError(n).Error()
		}
		if fd != nil && typ == protowire.BytesType {
			v, _ := protowire.ConsumeBytes(b)
			switch fd.Kind() {
			case protoreflect.StringKind:
				if !utf8.Valid(v) {
					return name, "must be valid UTF-8"
				}
			case protoreflect.MessageKind:
				if p, why := locate(fd.Message(), v); why != "" {
					if p == "" {
						return name, why
					}
					return name + "." + p, why
				}
			}
		}
		b = b[n:]
	}
	return "", ""
}
