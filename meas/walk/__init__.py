"""The switching-sequence walk that the console and headless mode both drive.

Modules: ``sequence`` (sequence validation, per-step configurations), ``states`` (State,
ACTIONS, COMMANDS, StepOutcome), ``walk_state`` (where the walk is, its records and
verdict, a step's bookkeeping), ``machine`` (the transitions on each snapshot), ``runner``
(the technician's commands), ``capture`` (picking N captures, review by median),
``live`` (the live settle watch), ``remote`` (remote guards), ``status`` (the switch-status
rule), ``view`` (``RunnerView``: the picture and the commands allowed now), ``ports`` (what
the runner is given, as Protocols).

Public API (console and headless mode; ``meas.session.Session`` builds one for you)::

    runner = Runner(profile, journal, checks=CheckEngine(profile).run,
                    settle_factory=meas.session.settle_factory(profile),
                    control=SwitchControl(profile, poller), operator="A. Tech",
                    start_index=0,            # resume: index of the first unfinished step
                    live_checks=True,         # False: check only captured snapshots (headless)
                    on_saved=None)            # callback(row, step_id, role) per journalled snapshot
    await runner.tick(snapshot)              # every polled snapshot, in order
    runner.view() -> RunnerView              # read-only picture for the screen

    # commands; each raises BenchwalkError with a sentence to show when not allowed now
    runner.confirm_operation()               # manual step: "I have operated it"
    runner.request_remote(switch_id, state) -> str   # 1st deliberate step: returns the question
    await runner.confirm_remote(switch_id, state, operator)  # 2nd step: sends the command
    runner.cancel_remote()                   # the request withdrawn (dialog closed), nothing sent
    runner.capture()                         # start a capture step / capture after settle timeout
    runner.retake()                          # reviewing (or settle timed out) -> settling again
    runner.skip(reason)                      # skip the current step, reason required
    runner.accept(reason=None)               # reviewing -> accepted (reason if checks failed, gate allow)
    runner.sign(name, acknowledge=False)     # hold step: named sign-off (acknowledge steps in
                                             # its scope that did not pass: view.hold_issues)
    runner.note(text)                        # note step: completes it; any other time: journal note
    runner.stop(reason)                      # end the session here; resumable at this step

    runner.done / runner.finished / runner.stopped   # sequence over / completed / stopped early
    runner.outcomes -> dict[step_id, StepOutcome]     # per step: outcome, worst status, failures
    runner.verdict(unverified=()) -> Verdict          # the session verdict (meas.verdict)

Import paths: ``Runner`` from ``meas.walk.runner``, ``RunnerView`` from ``meas.walk.view``,
``State``, ``StepOutcome``, ``ACTIONS`` and ``COMMANDS`` from ``meas.walk.states``,
``median_per_subject`` from ``meas.walk.capture``.

What a step must find: its full configuration (``meas.walk.sequence.configurations``): the
states it names plus those earlier steps left, verified on every switch with a status point.

Step states (``State``): ``waiting`` (for the technician) -> ``operating`` (remote command
sent) -> ``verifying`` (switch status against expectation, within control.verify_timeout_s)
-> ``settling`` -> ``capturing`` (N snapshots at the policy interval, checks on each) ->
``reviewing`` -> ``accepted`` | ``skipped``; ``retake()`` records ``retaken`` and returns to
``settling``. A remote status mismatch ends the sequence in ``stopped``; a manual one (the
switch not as expected when verification times out) returns to ``waiting`` with a message,
as does a switch changing while settling or capturing. A remote command is refused while
any other switch differs from the expectation. Steps without a capture policy go from
``verifying`` to ``reviewing`` with no results. Hold steps wait for ``sign(name)``, note
steps for ``note(text)``. The review judges each (check, subject) by its median status over
the N captures (``median_per_subject``); captures are checked against history from the
steady window only.

``RunnerView.action`` names what the technician does next, one of ``ACTIONS``: headless mode
maps it to a prompt. ``RunnerView.allowed`` is the set of commands offered now (names from
``COMMANDS``): the console enables exactly those keys.

Journal roles: snapshots during operating, verifying and settling are ``settling``, the N
picked during capturing are ``capture`` (with their check results), everything else is
``live``, thinned to one per ``live_every_s`` while waiting or reviewing.
"""
