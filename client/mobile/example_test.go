package mobile_test

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net"
	"os"
	"path/filepath"

	"google.golang.org/grpc"

	"tamp/client/mobile"
	"tamp/server"
	"tamp/server/sqlitestore"
)

// A tablet's day through the facade: enrol with the code an administrator
// gave, take the project's spec and reference on the first sync, record a
// test offline as JSON and read its result at once, then sync it.
func Example() {
	dir, _ := os.MkdirTemp("", "tamp-mobile-example")
	defer os.RemoveAll(dir)

	// The site's tampd, here in-process on loopback.
	st, _ := sqlitestore.Open(context.Background(), filepath.Join(dir, "ledger.db"), sqlitestore.Options{})
	defer st.Close()
	srv := server.New(server.Options{Store: st, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	defer srv.Close()
	g := grpc.NewServer(srv.RequestCodec(), grpc.ChainUnaryInterceptor(srv.UnaryInterceptor), grpc.ChainStreamInterceptor(srv.StreamInterceptor))
	srv.Register(g)
	lis, _ := net.Listen("tcp", "127.0.0.1:0")
	go g.Serve(lis)
	defer g.Stop()
	addr := lis.Addr().String()
	ctx := context.Background()
	project, _ := srv.CreateProject(ctx, "Greasewood Bench pad")
	code := func(name string, role server.Role) string {
		user, _ := srv.AddUser(ctx, name, false)
		srv.AddMember(ctx, project, user, role)
		c, _, _ := srv.IssueEnrollmentCode(ctx, user)
		return c
	}

	// The QA manager's laptop defines the spec and the reference.
	qa, _ := mobile.Open(filepath.Join(dir, "qa.db"), nil)
	defer qa.Close()
	qa.Enroll(addr, "", true, code("Quade", server.QA), "QA laptop", nil)
	spec, _ := qa.DefineSpec(project, `{"name": "pad fill", "min_compaction": "95", "moisture_low": "-2", "moisture_high": "2"}`)
	ref, _ := qa.AddReference(project, `{"material": "tan silty sand", "standard": "ASTM D698", "method": "A", "max_dry_density": 1858.1, "optimum_moisture": 13.5}`)
	qa.Sync(addr, "", true, project, nil, nil)

	// The inspector's tablet.
	tablet, err := mobile.Open(filepath.Join(dir, "tablet.db"), nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	defer tablet.Close()
	if _, err := tablet.Enroll(addr, "", true, code("Ines", server.Inspector), "tablet 3", mobile.NewCancel()); err != nil {
		fmt.Println(mobile.ErrorReason(err.Error()))
		return
	}
	tablet.Sync(addr, "", true, project, nil, nil)
	text, err := tablet.RecordTest(fmt.Sprintf(`{"project": %q, "spec_id": %q, "reference_id": %q,
		"readings": {"wet_density": {"wet_density": 2000, "moisture": 12}}}`, project, spec, ref))
	if err != nil {
		fmt.Println(mobile.ErrorReason(err.Error()))
		return
	}
	var rec struct {
		Result struct {
			Result struct {
				DryDensity         float64 `json:"dry_density"`
				RelativeCompaction float64 `json:"relative_compaction"`
				Verdict            string  `json:"verdict"`
			} `json:"result"`
		} `json:"result"`
	}
	json.Unmarshal([]byte(text), &rec)
	r := rec.Result.Result
	fmt.Printf("dry density %.0f kg/m3, relative compaction %.1f %%: %s\n", r.DryDensity, r.RelativeCompaction, r.Verdict)

	text, err = tablet.Sync(addr, "", true, project, nil, mobile.NewCancel())
	if err != nil {
		fmt.Println(mobile.ErrorReason(err.Error()))
		return
	}
	var rep struct {
		Sync struct {
			Accepted int `json:"accepted"`
		} `json:"sync"`
	}
	json.Unmarshal([]byte(text), &rep)
	fmt.Printf("synced: %d accepted\n", rep.Sync.Accepted)
	// Output:
	// dry density 1786 kg/m3, relative compaction 96.1 %: pass
	// synced: 1 accepted
}
