package mqtt

import (
	"bytes"
	"context"
	"fmt"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
)

// subscribeFailure is the SUBACK return code of a refused subscription
// (MQTT 3.1.1 section 3.9.3).
const subscribeFailure = 0x80

// subscribeCommands subscribes c to CommandTopic at QoS 1 and waits up to
// timeout for the SUBACK. A subscription the broker refuses (its access
// control) is logged as an error and the connection is kept, for the
// readings still flow; a SUBACK that does not come is an error.
func (p *Publisher) subscribeCommands(c paho.Client, timeout time.Duration) error {
	tok := c.Subscribe(p.o.CommandTopic, 1, p.receiveCommand)
	if !tok.WaitTimeout(timeout) {
		return fmt.Errorf("subscribe %s: no SUBACK within %v", p.o.CommandTopic, timeout)
	}
	if err := tok.Error(); err != nil {
		return fmt.Errorf("subscribe %s: %w", p.o.CommandTopic, err)
	}
	if st, ok := tok.(*paho.SubscribeToken); ok {
		if code, ok := st.Result()[p.o.CommandTopic]; ok && code == subscribeFailure {
			p.log.Error("mqtt command subscription refused by the broker; commands will not arrive",
				"topic", p.o.CommandTopic, "check", "the broker's access control for this client")
		}
	}
	return nil
}

// receiveCommand runs on a paho goroutine: it must not block. It queues a
// copy of the payload for runCommands, or drops it when the queue is full.
func (p *Publisher) receiveCommand(_ paho.Client, m paho.Message) {
	if m.Retained() {
		p.log.Warn("mqtt retained command ignored", "topic", m.Topic(), "bytes", len(m.Payload()))
		return
	}
	select {
	case p.cmds <- bytes.Clone(m.Payload()):
		return
	default:
	}
	p.mu.Lock()
	p.commandsDropped++
	logIt, held := p.cmdLog.allow(time.Now())
	p.mu.Unlock()
	if logIt {
		p.log.Warn("mqtt command dropped: earlier commands still waiting", "topic", m.Topic(),
			"waiting", commandBuffer, "dropped_since_last_report", held)
	}
}

// runCommands hands received commands to OnCommand, one at a time, until
// ctx ends.
func (p *Publisher) runCommands(ctx context.Context) {
	for {
		select {
		case <-ctx.Done():
			return
		case c := <-p.cmds:
			p.mu.Lock()
			p.commands++
			p.mu.Unlock()
			p.o.OnCommand(c)
		}
	}
}

// Reply publishes payload on topic, not retained, through the in-memory
// queue, as Publish does (the answer to a command, typically on the
// command reply topic).
func (p *Publisher) Reply(topic string, payload []byte) bool {
	return p.Publish(Message{Topic: topic, Payload: payload})
}
