// Package mqtt is the gateway's MQTT adapter around paho.mqtt.golang.
package mqtt

import "context"

// Message is one received MQTT message. Ack acknowledges it to the broker
// (QoS 1); call it only once the message's effect is durable.
type Message struct {
	Topic     string
	Payload   []byte
	Duplicate bool // the broker is redelivering it
	QoS       byte
	Retained  bool
	Ack       func()
}

// Publisher publishes messages.
type Publisher interface {
	Publish(ctx context.Context, topic string, qos byte, retained bool, payload []byte) error
}

// Subscriber subscribes to topic filters; subscriptions survive reconnects.
type Subscriber interface {
	Subscribe(filter string, qos byte, handle func(Message)) error
}
