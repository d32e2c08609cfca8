package record

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"net/url"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	_ "github.com/jackc/pgx/v5/stdlib" // database/sql driver "pgx"
	_ "modernc.org/sqlite"             // database/sql driver "sqlite"
)

// EnvVar names the environment variable that gives the store when neither
// the command line nor the protocol does.
const EnvVar = "VOXGAMMA_RECORD"

// BusyTimeout is how long an SQLite writer waits for another one (another
// batch worker or process) to finish before giving up.
const BusyTimeout = 60 * time.Second

// dialect is the SQL flavour of a store.
type dialect int

const (
	sqliteDialect dialect = iota
	postgresDialect
)

// Store is an open results store. It is safe for concurrent use by many
// goroutines; several processes may open the same store at once.
type Store struct {
	db      *sql.DB
	dialect dialect
	// name is the store as the user named it, with any password removed,
	// for messages.
	name string
}

// IsPostgres reports whether dsn names a PostgreSQL database
// (postgres:// or postgresql:// URL) rather than an SQLite file.
func IsPostgres(dsn string) bool {
	l := strings.ToLower(dsn)
	return strings.HasPrefix(l, "postgres://") || strings.HasPrefix(l, "postgresql://")
}

// Open opens the store named by dsn: a postgres:// or postgresql:// URL for
// a PostgreSQL database, anything else the path of an SQLite file (created
// when missing, its folder must exist). It brings the schema up to date
// (see [Migrate]) and returns an error naming the store when it cannot be
// opened, or when its schema is newer than this program knows.
func Open(ctx context.Context, dsn string) (*Store, error) {
	if strings.TrimSpace(dsn) == "" {
		return nil, errors.New("results store: no database given")
	}
	s := &Store{name: Redact(dsn)}
	var err error
	if IsPostgres(dsn) {
		s.dialect = postgresDialect
		s.db, err = sql.Open("pgx", dsn)
		if err == nil {
			s.db.SetMaxOpenConns(4)
		}
	} else {
		s.dialect = sqliteDialect
		s.db, err = openSQLite(dsn)
	}
	if err != nil {
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	if err := s.db.PingContext(ctx); err != nil {
		s.db.Close()
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	if err := s.migrate(ctx, len(migrations)); err != nil {
		s.db.Close()
		return nil, fmt.Errorf("results store %s: %w", s.name, err)
	}
	return s, nil
}

// openSQLite opens an SQLite file in WAL mode, with a busy timeout, foreign
// keys enforced, full synchronous commits, and write transactions that take
// the write lock when they begin (BEGIN IMMEDIATE), so that concurrent
// writers queue instead of failing on a lock upgrade.
func openSQLite(path string) (*sql.DB, error) {
	abs, err := filepath.Abs(path)
	if err != nil {
		return nil, err
	}
	dir := filepath.Dir(abs)
	if st, err := os.Stat(dir); err != nil || !st.IsDir() {
		return nil, fmt.Errorf("folder %s does not exist", dir)
	}
	esc := strings.NewReplacer("%", "%25", "?", "%3f", "#", "%23").Replace(filepath.ToSlash(abs))
	q := url.Values{}
	q.Set("_busy_timeout", strconv.FormatInt(BusyTimeout.Milliseconds(), 10))
	q.Set("_journal_mode", "WAL")
	q.Set("_synchronous", "FULL")
	q.Set("_foreign_keys", "1")
	q.Set("_txlock", "immediate")
	return sql.Open("sqlite", "file:"+esc+"?"+q.Encode())
}

// Close closes the store.
func (s *Store) Close() error { return s.db.Close() }

// Name is the store as named when opened, without a password.
func (s *Store) Name() string { return s.name }

// Redact returns dsn with the password of a URL replaced by "xxxxx".
func Redact(dsn string) string {
	if !IsPostgres(dsn) {
		return dsn
	}
	u, err := url.Parse(dsn)
	if err != nil {
		return "postgres://…"
	}
	return u.Redacted()
}

// rebind turns the ? placeholders of q into $1, $2, ... for PostgreSQL.
func (s *Store) rebind(q string) string {
	if s.dialect != postgresDialect {
		return q
	}
	var b strings.Builder
	n := 0
	for _, r := range q {
		if r == '?' {
			n++
			b.WriteString("$" + strconv.Itoa(n))
			continue
		}
		b.WriteRune(r)
	}
	return b.String()
}

// timeLayout is how times are stored: UTC, fixed width, so that text order
// is time order in both databases.
const timeLayout = "2006-01-02T15:04:05.000000Z"

func formatTime(t time.Time) string { return t.UTC().Format(timeLayout) }

func parseTime(s string) (time.Time, error) { return time.Parse(timeLayout, s) }
