package config

import "time"

// Journal and checkpoint defaults and limits. A message is acknowledged
// only once it is durable; the journal makes a window of messages durable
// with one small append and one fdatasync, and the state file takes the
// readings in one transaction per checkpoint. At a farm's load (84
// stations × 6 sensors, a reading a minute) that writes well under a
// gigabyte a day where a transaction per message wrote about 15 (see
// deploy/PERFORMANCE.md).
const (
	DefaultAckWindow       = 2 * time.Second
	DefaultCheckpointEvery = 5 * time.Minute
	maxAckWindow           = 10 * time.Second
	maxCheckpointEvery     = time.Hour
)

func (s *State) setDefaults() {
	if s.Path == "" {
		s.Path = "etpulse.db"
	}
	if s.Journal == nil {
		on := true
		s.Journal = &on
	}
	if s.AckWindow == 0 {
		s.AckWindow = Duration(DefaultAckWindow)
	}
	if s.CheckpointEvery == 0 {
		s.CheckpointEvery = Duration(DefaultCheckpointEvery)
	}
}

// Journalled reports whether received messages go through the journal
// (the default); false for a configuration that turned it off.
func (s State) Journalled() bool { return s.Journal == nil || *s.Journal }

func (s *State) validate(path string, p *Problems) {
	if s.AckWindow < 0 || s.AckWindow.D() > maxAckWindow {
		p.Addf(path+".ack_window", "must be at most %s, got %s (the broker holds unacknowledged messages meanwhile; unset means %s)", maxAckWindow, s.AckWindow, DefaultAckWindow)
	}
	if s.CheckpointEvery < 0 || s.CheckpointEvery.D() > maxCheckpointEvery {
		p.Addf(path+".checkpoint_every", "must be at most %s, got %s (readings wait in the journal this long before the state file and the status pages have them; unset means %s)", maxCheckpointEvery, s.CheckpointEvery, DefaultCheckpointEvery)
	}
}
