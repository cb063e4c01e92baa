package daemon

import (
	"context"
	"testing"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/encoding/protowire"

	pb "tamp/internal/gen/tamp/v1"
)

// rawBytes is a codec that sends the bytes given, as no well-behaved
// client would.
type rawBytes struct{}

func (rawBytes) Marshal(v any) ([]byte, error) { return *v.(*[]byte), nil }
func (rawBytes) Unmarshal(b []byte, v any) error {
	*v.(*[]byte) = append([]byte(nil), b...)
	return nil
}
func (rawBytes) Name() string { return "proto" }

// TestServeMalformedRequestIsInvalidArgument: tampd answers a request
// whose string field is not UTF-8 with InvalidArgument naming the field.
func TestServeMalformedRequestIsInvalidArgument(t *testing.T) {
	addr, stop := startServe(t)
	defer func() {
		if err := stop(); err != nil {
			t.Errorf("shutdown: %v", err)
		}
	}()
	cc, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer cc.Close()
	num := (&pb.EnrollDeviceRequest{}).ProtoReflect().Descriptor().Fields().ByName("device_name").Number()
	req := protowire.AppendString(protowire.AppendTag(nil, num, protowire.BytesType), "tablet \xff")
	var reply []byte
	err = cc.Invoke(context.Background(), pb.AdminService_EnrollDevice_FullMethodName, &req, &reply, grpc.ForceCodec(rawBytes{}))
	if info := errorInfo(err); status.Code(err) != codes.InvalidArgument || info.GetReason() != "INVALID_ARGUMENT" || info.GetMetadata()["field"] != "device_name" {
		t.Errorf("EnrollDevice with a device_name that is not UTF-8: %v, want InvalidArgument naming device_name", err)
	}
}

// errorInfo returns the server's ErrorInfo detail of a status error, or nil.
func errorInfo(err error) *errdetails.ErrorInfo {
	for _, d := range status.Convert(err).Details() {
		if info, ok := d.(*errdetails.ErrorInfo); ok && info.GetDomain() == "tamp" {
			return info
		}
	}
	return nil
}
