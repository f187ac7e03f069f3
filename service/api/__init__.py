"""One router per resource; each parses, authorises, calls service.domain or service.storage, and answers.
No router imports another (checked by `make lint`); what they share lives in service.http."""
