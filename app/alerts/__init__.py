"""Tank advice, alert rules, the alert state machine, the outbox and the mail sender."""
