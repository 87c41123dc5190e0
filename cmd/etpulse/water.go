package main

import (
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/store"
	"etpulse/gateway/zones"
)

var waterHelp = helpText{
	name:  "water",
	usage: "etpulse water [--config] FILE [--site SITE] --zone ZONE (--mm X | --minutes M | --volume-l L | --set-depletion D) [--frost] --who NAME --why TEXT [--time TIME]",
	intro: `Records water the gateway did not command in a zone's balance: a run
started by hand, frost protection, or a hand-measured depletion. It sends
the request to the running gateway over the configured broker (topic
<prefix>/<site>/water), waits for the answer on <prefix>/<site>/water/reply
and prints it. It does not open the state file, so it works beside the
running gateway. The gateway refuses implausible requests (more than the
zone's TAW, a depletion above TAW, a time in the future or older than the
72 hours the balance keeps) and says why.

--mm is a net depth (what reached the root zone); --minutes (run on the
zone's own system) and --volume-l (a meter reading) are gross: the zone's
efficiency is applied as for a command's credit. --set-depletion D sets the
depletion (mm below field capacity) measured at --time.`,
	outro: `Times: RFC 3339, or UTC 2006-01-02 / 2006-01-02T15:04.

Example:
  etpulse water --config /etc/etpulse/etpulse.yaml --zone row-a \
    --minutes 45 --who ana --why "flushed the lateral after a repair"

Exit status: 0 recorded, 1 refused by the gateway or no answer (broker
down, gateway not running), 2 bad command line or configuration.`,
}

// runWater sends one water request to the gateway and prints its reply.
func runWater(ctx context.Context, args []string, _ io.Reader, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("water", flag.ContinueOnError)
	configPath := fs.String("config", "", "configuration `file`: broker, topic prefix, sites and zones")
	site := fs.String("site", "", "`site` id; may be left out when the configuration has one site")
	zone := fs.String("zone", "", "`zone` id")
	mm := fs.Float64("mm", 0, "net `depth` applied, mm (what reached the root zone)")
	minutes := fs.Float64("minutes", 0, "`minutes` run on the zone's own system (gross)")
	volume := fs.Float64("volume-l", 0, "metered `litres` applied to the zone (gross)")
	depletion := fs.Float64("set-depletion", 0, "measured depletion, `mm` below field capacity")
	frost := fs.Bool("frost", false, "the water was applied for frost protection")
	who := fs.String("who", "", "`name` of who applied the water or measured")
	why := fs.String("why", "", "`reason`, kept in the history")
	at := fs.String("time", "", "`time` the water was applied or the measurement taken (default now)")
	id := fs.String("id", "", "request `id` (default generated); the gateway applies an id once, so give the printed id again to retry safely")
	timeout := fs.Duration("timeout", 30*time.Second, "`duration` to wait for the gateway's answer")
	if code, done := parseConfigFlags(fs, args, waterHelp, configPath, stdout, stderr); done {
		return code
	}
	usageErr := func(format string, a ...any) int { return usageError(stderr, waterHelp, format, a...) }
	if fs.NArg() > 0 {
		return usageErr("unexpected argument %q", fs.Arg(0))
	}
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if *configPath == "" {
		return usageErr(configForms)
	}
	if *zone == "" {
		return usageErr("--zone is required")
	}
	if *timeout <= 0 {
		return usageErr("--timeout must be > 0, got %s", *timeout)
	}

	req := zones.WaterRequest{ID: *id, Zone: *zone, Kind: "applied", Who: *who, Why: *why}
	if req.ID == "" {
		req.ID = fmt.Sprintf("cli-%d-%d", os.Getpid(), time.Now().UnixNano())
	}
	var given []string
	for _, a := range []struct {
		flag string
		v    float64
		dst  **float64
	}{{"mm", *mm, &req.MM}, {"minutes", *minutes, &req.Minutes}, {"volume-l", *volume, &req.VolumeL}, {"set-depletion", *depletion, &req.DepletionMM}} {
		if set[a.flag] {
			v := a.v
			*a.dst = &v
			given = append(given, "--"+a.flag)
		}
	}
	if len(given) != 1 {
		return usageErr("give exactly one of --mm, --minutes, --volume-l or --set-depletion, got %d (%s)", len(given), strings.Join(given, " "))
	}
	switch {
	case req.DepletionMM != nil && *frost:
		return usageErr("--frost goes with an amount of water, not with --set-depletion")
	case req.DepletionMM != nil:
		req.Kind = "depletion_reset"
	case *frost:
		req.Kind = "frost_protection"
	}
	if *at != "" {
		t, err := store.ParseTime(*at)
		if err != nil {
			return usageErr("--time: %v", err)
		}
		req.Time = t.Format(time.RFC3339)
	}
	payload, err := json.Marshal(req)
	if err != nil {
		return usageErr("encode request: %v", err)
	}
	if _, err := zones.DecodeWaterRequest(payload); err != nil {
		return usageErr("%v", strings.TrimPrefix(err.Error(), "decode water request: "))
	}

	cfg, err := config.Load(*configPath)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse water: %v\n", err)
		return exitUsage
	}
	s, err := waterSite(cfg, *site, *zone)
	if err != nil {
		return usageErr("%v", err)
	}
	mo, err := mqtt.OptionsFromConfig(cfg.Broker)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse water: %v\n", err)
		return exitUsage
	}
	// Its own short-lived session: the gateway's client id must not be
	// taken over.
	mo.ClientID = fmt.Sprintf("%s-water-%d", cfg.Broker.ClientID, os.Getpid())
	mo.CleanSession = true
	mo.Workers = 1

	reply, err := askWater(ctx, mo, config.WaterTopic(cfg.Prefix(), s), config.WaterReplyTopic(cfg.Prefix(), s), req.ID, payload, *timeout)
	if err != nil {
		fmt.Fprintf(stderr, "etpulse water: %v\n", err)
		return exitError
	}
	if !reply.OK {
		fmt.Fprintf(stderr, "etpulse water: refused: %s\n", reply.Error)
		return exitError
	}
	if reply.Duplicate {
		fmt.Fprintf(stdout, "already recorded: request %s was applied before; nothing applied again\n", reply.ID)
		return exitOK
	}
	fmt.Fprintf(stdout, "recorded %s for zone %s of %s: net %.1f mm, drained %.1f mm, depletion %.1f -> %.1f mm (request %s)\n",
		reply.Kind, reply.Zone, s, deref(reply.NetMM), deref(reply.DrainageMM), deref(reply.PreviousMM), deref(reply.DepletionMM), reply.ID)
	return exitOK
}

func deref(p *float64) float64 {
	if p == nil {
		return 0
	}
	return *p
}

// waterSite returns the site that holds zone: the one named, or the only one.
func waterSite(cfg *config.Config, site, zone string) (string, error) {
	var ids []string
	for i := range cfg.Sites {
		s := &cfg.Sites[i]
		ids = append(ids, s.ID)
		if site != "" && s.ID != site {
			continue
		}
		if site == "" && len(cfg.Sites) > 1 {
			continue
		}
		for _, z := range s.Zones {
			if z.ID == zone {
				return s.ID, nil
			}
		}
		return "", fmt.Errorf("--zone: no zone %q in site %s of the configuration", zone, s.ID)
	}
	if site == "" {
		return "", fmt.Errorf("--site: the configuration has %d sites (%s); name one", len(ids), strings.Join(ids, ", "))
	}
	return "", fmt.Errorf("--site: no site %q in the configuration (sites: %s)", site, strings.Join(ids, ", "))
}

// askWater publishes the request on topic and waits for the reply with id
// on replyTopic.
func askWater(ctx context.Context, mo mqtt.Options, topic, replyTopic, id string, payload []byte, timeout time.Duration) (zones.WaterReply, error) {
	ctx, cancel := context.WithTimeout(ctx, timeout)
	defer cancel()
	c, err := mqtt.Dial(ctx, mo)
	if err != nil {
		return zones.WaterReply{}, fmt.Errorf("connect to broker %s: %w", mo.URL, err)
	}
	defer c.Close(time.Second)
	replies := make(chan zones.WaterReply, 1)
	err = c.Subscribe(replyTopic, 1, func(m mqtt.Message) {
		var r zones.WaterReply
		if json.Unmarshal(m.Payload, &r) == nil && r.ID == id {
			select {
			case replies <- r:
			default:
			}
		}
		m.Ack()
	})
	if err != nil {
		return zones.WaterReply{}, fmt.Errorf("subscribe %s: %w", replyTopic, err)
	}
	if err := c.Publish(ctx, topic, 1, false, payload); err != nil {
		return zones.WaterReply{}, fmt.Errorf("publish %s: %w", topic, err)
	}
	select {
	case r := <-replies:
		return r, nil
	case <-ctx.Done():
		return zones.WaterReply{}, fmt.Errorf("no answer on %s within %s: is the gateway running for this site? (request %s may still be applied when it comes back; retry with --id %s)", replyTopic, timeout, id, id)
	}
}
