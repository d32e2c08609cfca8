// Package pgtest gives tests a database of their own on the real
// PostgreSQL server that CI starts (.ci/run). The server is named by the
// environment variable VOXGAMMA_TEST_POSTGRES, a postgres:// URL whose user
// may create databases, e.g.
//
//	postgres://postgres@/postgres?host=/tmp/voxgamma-pg&port=5433
//
// Without it a test is skipped with a message, and fails when the
// environment variable CI is set (CI must provide the server).
package pgtest

import (
	"context"
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"fmt"
	"net/url"
	"os"
	"testing"
	"time"

	_ "github.com/jackc/pgx/v5/stdlib" // database/sql driver "pgx"
)

// EnvVar names the server for the tests.
const EnvVar = "VOXGAMMA_TEST_POSTGRES"

// ServerURL returns the server's URL, or skips the test (fails it on CI).
func ServerURL(t testing.TB) string {
	t.Helper()
	u := os.Getenv(EnvVar)
	if u == "" {
		msg := "no PostgreSQL server for the tests: set " + EnvVar + " to a postgres:// URL (.ci/run starts one from Debian's postgresql package)"
		if os.Getenv("CI") != "" {
			t.Fatal("CI must provide it: " + msg)
		}
		t.Skip(msg)
	}
	return u
}

// NewDatabase creates an empty database on the server for this test and
// returns its URL; the database is dropped when the test ends.
func NewDatabase(t testing.TB) string {
	t.Helper()
	server := ServerURL(t)
	b := make([]byte, 6)
	rand.Read(b)
	name := "voxgamma_test_" + hex.EncodeToString(b)
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	admin, err := sql.Open("pgx", server)
	if err != nil {
		t.Fatalf("PostgreSQL %s: %v", EnvVar, err)
	}
	defer admin.Close()
	if _, err := admin.ExecContext(ctx, "CREATE DATABASE "+name); err != nil {
		t.Fatalf("PostgreSQL (%s): creating a test database: %v", EnvVar, err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		a, err := sql.Open("pgx", server)
		if err != nil {
			return
		}
		defer a.Close()
		if _, err := a.ExecContext(ctx, "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)"); err != nil {
			t.Logf("dropping test database %s: %v", name, err)
		}
	})
	dsn, err := WithDatabase(server, name)
	if err != nil {
		t.Fatal(err)
	}
	return dsn
}

// WithDatabase returns the URL server with its database replaced by name.
func WithDatabase(server, name string) (string, error) {
	u, err := url.Parse(server)
	if err != nil {
		return "", fmt.Errorf("%s: %w", EnvVar, err)
	}
	u.Path = "/" + name
	u.RawPath = ""
	return u.String(), nil
}
