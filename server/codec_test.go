package server_test

import (
	"context"
	"errors"
	"io"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/encoding/protowire"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protoreflect"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/server"
)

// rawCodec sends and receives messages as the bytes given, so a test can
// put on the wire what no well-behaved client would.
type rawCodec struct{}

func (rawCodec) Marshal(v any) ([]byte, error) { return *v.(*[]byte), nil }
func (rawCodec) Unmarshal(b []byte, v any) error {
	*v.(*[]byte) = append([]byte(nil), b...)
	return nil
}
func (rawCodec) Name() string { return "proto" }
func fieldNum(m proto.Message, name string) protowire.Number {
	return m.ProtoReflect().Descriptor().Fields().ByName(protoreflect.Name(name)).Number()
}

// withString appends field name of m holding s, which need not be UTF-8.
func withString(b []byte, m proto.Message, name, s string) []byte {
	b = protowire.AppendTag(b, fieldNum(m, name), protowire.BytesType)
	return protowire.AppendString(b, s)
}

// TestMalformedRequestIsInvalidArgument sends requests that do not decode
// (invalid UTF-8 in a string field, top level or nested, and truncated
// wire data) to a server on 127.0.0.1:0, on unary and streaming methods,
// with and without a token: each is refused with InvalidArgument naming the
// problem, not Internal, and a good request still works.
func TestMalformedRequestIsInvalidArgument(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Quarry Road embankment")
	d := c.rawDevice(t, "ann", map[string]server.Role{project: server.Inspector}, false)
	cc := c.conn("")

	enrol := &pb.EnrollDeviceRequest{}
	checkpoint := withString(nil, &pb.Checkpoint{}, "project_id", "p\xc3\x28")
	unary := []struct {
		name, method string
		ctx          context.Context
		req          []byte
		want         string // the field the refusal names
	}{
		{"invalid UTF-8", pb.AdminService_EnrollDevice_FullMethodName, context.Background(),
			withString(withString(nil, enrol, "code", "abc"), enrol, "device_name", "tablet \xff\xfe"), "device_name"},
		{"truncated", pb.AdminService_EnrollDevice_FullMethodName, context.Background(),
			append(protowire.AppendTag(nil, fieldNum(enrol, "code"), protowire.BytesType), 40, 'a'), "code"},
		{"invalid UTF-8 with a token", pb.SyncService_Push_FullMethodName, d.ctx(),
			withString(nil, &pb.PushRequest{}, "project_id", project+"\x80"), "project_id"},
		{"nested invalid UTF-8", pb.SyncService_Push_FullMethodName, d.ctx(),
			protowire.AppendBytes(protowire.AppendTag(withString(nil, &pb.PushRequest{}, "project_id", project),
				fieldNum(&pb.PushRequest{}, "verified"), protowire.BytesType), checkpoint), "verified.project_id"},
	}
	for _, tc := range unary {
		t.Run(tc.name, func(t *testing.T) {
			var reply []byte
			err := cc.Invoke(tc.ctx, tc.method, &tc.req, &reply, grpc.ForceCodec(rawCodec{}))
			if reason, field, _ := reasonOf(err); status.Code(err) != codes.InvalidArgument || reason != "INVALID_ARGUMENT" || field != tc.want {
				t.Errorf("%s: %v, want InvalidArgument naming %s", tc.method, err, tc.want)
			}
		})
	}
	t.Run("streaming", func(t *testing.T) {
		req := protowire.AppendBytes(protowire.AppendTag(withString(nil, &pb.PullRequest{}, "project_id", project),
			fieldNum(&pb.PullRequest{}, "after"), protowire.BytesType), checkpoint)
		desc := &grpc.StreamDesc{StreamName: "Pull", ServerStreams: true}
		cs, err := cc.NewStream(d.ctx(), desc, pb.SyncService_Pull_FullMethodName, grpc.ForceCodec(rawCodec{}))
		if err != nil {
			t.Fatal(err)
		}
		if err := cs.SendMsg(&req); err != nil {
			t.Fatal(err)
		}
		if err := cs.CloseSend(); err != nil {
			t.Fatal(err)
		}
		var reply []byte
		err = cs.RecvMsg(&reply)
		for err == nil {
			err = cs.RecvMsg(&reply)
		}
		if _, field, _ := reasonOf(err); errors.Is(err, io.EOF) || status.Code(err) != codes.InvalidArgument || field != "after.project_id" {
			t.Errorf("Pull: %v, want InvalidArgument naming after.project_id", err)
		}
	})
	t.Run("well formed", func(t *testing.T) {
		if _, err := pb.NewSyncServiceClient(cc).Push(d.ctx(), &pb.PushRequest{ProjectId: project}); err != nil {
			t.Errorf("an empty push: %v", err)
		}
	})
}
