package mqtt_test

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"testing"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
)

// Environment of the child process of TestOutboxProcessKilled.
const (
	childDirEnv    = "GLOWGATE_OUTBOX_CHILD_DIR"
	childBrokerEnv = "GLOWGATE_OUTBOX_CHILD_BROKER"
)

// TestOutboxChildProcess is not a test of its own: it is the gateway
// process that TestOutboxProcessKilled starts (this test binary, run
// again with the environment above) and kills with SIGKILL. Run without
// that environment, it returns at once.
//
// It publishes through an outbox in the directory given, appending a
// reading every 2 ms, and after every 50 appends waits for their commit
// and prints "synced SEQ": every entry up to SEQ is durable.
func TestOutboxChildProcess(t *testing.T) {
	dir := os.Getenv(childDirEnv)
	if dir == "" {
		return
	}
	ob, err := mqtt.OpenOutbox(dir, mqtt.OutboxOptions{GapTopic: tp.Events(), Gateway: tp.Gateway})
	if err != nil {
		fmt.Println("error", err)
		os.Exit(3)
	}
	p, err := mqtt.NewPublisher(mqtt.Options{
		Brokers:        []string{os.Getenv(childBrokerEnv)},
		ClientID:       "glowgate-child",
		StateTopic:     tp.State(),
		ConnectTimeout: time.Second,
		BackoffMin:     20 * time.Millisecond,
		BackoffMax:     200 * time.Millisecond,
		Outbox:         ob,
	})
	if err != nil {
		fmt.Println("error", err)
		os.Exit(3)
	}
	go func() { _ = p.Run(context.Background()) }()
	r := mqtt.Reading{Gateway: tp.Gateway, Head: "h1", Unit: "degC", Quality: "good"}
	tick := time.NewTicker(2 * time.Millisecond)
	for i := 1; ; i++ {
		<-tick.C
		seq, err := ob.Append(mqtt.KindReading, tp.Reading("h1"), false, func(seq uint64) []byte {
			r.Seq, r.Time = seq, time.Now()
			return r.AppendJSON(nil)
		})
		if err != nil {
			fmt.Println("error", err)
			os.Exit(3)
		}
		if i%50 == 0 {
			if err := ob.Sync(); err != nil {
				fmt.Println("error", err)
				os.Exit(3)
			}
			fmt.Println("synced", seq)
		}
	}
}

// A gateway process killed with SIGKILL during an outage loses nothing it
// had committed: the outbox reopened by the next process holds every
// entry not acknowledged, its sequence numbers continue, and a subscriber
// ends with every sequence number up to the last one the killed process
// reported durable, those of the outage marked replayed.
func TestOutboxProcessKilled(t *testing.T) {
	broker := mqtttest.Start(t)
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	c := collectSeqs(t, sub)
	proxy := mqtttest.NewProxy(t, broker.Addr())
	dir := t.TempDir()

	cmd := exec.Command(os.Args[0], "-test.run=^TestOutboxChildProcess$", "-test.count=1")
	cmd.Env = append(os.Environ(), childDirEnv+"="+dir, childBrokerEnv+"="+proxy.URL())
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	cmd.Stderr = os.Stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	exited := make(chan struct{})
	t.Cleanup(func() {
		_ = cmd.Process.Kill()
		<-exited
	})
	synced := make(chan uint64, 1024)
	go func() {
		defer close(exited)
		readSynced(t, stdout, synced)
		_ = cmd.Wait()
	}()
	var last uint64
	next := func() uint64 {
		t.Helper()
		select {
		case s, ok := <-synced:
			if !ok {
				t.Fatalf("child process ended after synced %d", last)
			}
			last = s
			return s
		case <-time.After(wait):
			t.Fatalf("child process silent for %v after synced %d", wait, last)
			return 0
		}
	}

	// Connected: readings flow.
	c.waitFor(t, "200 readings from the child", func(first map[uint64]arrival) bool { return len(first) >= 200 })
	// Outage: the link cut and held while the child appends 500 more.
	proxy.Stall()
	proxy.Cut()
	for next() < c.maxSeq()+500 {
	}
	if err := cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	<-exited
	for s := range synced { // lines read before the kill
		last = s
	}
	// Nothing arrives between the cut and the next publisher: later
	// sequence numbers come from the reopened outbox, as its backlog.
	outageFrom := c.maxSeq()
	t.Logf("child killed after synced %d; last arrival before %d", last, outageFrom)

	ob := openOutbox(t, dir)
	st := ob.Stats()
	if st.LastSeq < last || st.Depth == 0 {
		t.Fatalf("reopened outbox %+v, want LastSeq >= %d", st, last)
	}
	proxy.Resume()
	o := testOptions(t, proxy.URL())
	o.Outbox = ob
	p := newPublisher(t, o)
	stop := run(t, p)
	c.waitAll(t, last)
	c.checkOrder(t)
	c.mu.Lock()
	for s := outageFrom + 1; s <= last; s++ {
		if !c.first[s].replayed {
			t.Errorf("seq %d of the outage arrived first without replayed", s)
			break
		}
	}
	c.mu.Unlock()
	seq, err := ob.Append(mqtt.KindEvent, tp.Events(), false, func(uint64) []byte { return []byte(`{}`) })
	if err != nil || seq != st.LastSeq+1 {
		t.Errorf("first append after reopening: seq %d, %v; want %d", seq, err, st.LastSeq+1)
	}
	if err := stop(); err != nil {
		t.Fatal(err)
	}
}

// readSynced sends the numbers of the child's "synced N" lines to out
// and closes it at the end of its output.
func readSynced(t *testing.T, r io.Reader, out chan<- uint64) {
	defer close(out)
	sc := bufio.NewScanner(r)
	for sc.Scan() {
		line := sc.Text()
		if s, ok := strings.CutPrefix(line, "synced "); ok {
			n, err := strconv.ParseUint(s, 10, 64)
			if err != nil {
				t.Errorf("child: %q", line)
				continue
			}
			out <- n
		} else if strings.HasPrefix(line, "error ") {
			t.Errorf("child: %s", line)
		}
	}
}
