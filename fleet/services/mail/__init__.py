"""Mail through the plant's SMTP server: alerts when a followed pump gets worse, the weekly review as a digest.

settings: the server, sender and links from the environment. addresses: which addresses are accepted. follows:
who follows which pumps. compose: each mail's text and HTML. outbox: mail queued as rows in the transaction that
decided it. send: delivery after the commit, with retries.
"""
