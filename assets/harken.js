// Every audio player starts at a low volume: recordings of impacts can be loud.
(function () {
    var START_VOLUME = 0.2;
    function quiet(root) {
        var players = (root.querySelectorAll ? root.querySelectorAll('audio') : []);
        for (var i = 0; i < players.length; i++) {
            if (!players[i].dataset.harkenQuiet) {
                players[i].volume = START_VOLUME;
                players[i].dataset.harkenQuiet = '1';
            }
        }
    }
    function start() {
        quiet(document);
        new MutationObserver(function () { quiet(document); })
            .observe(document.body, {childList: true, subtree: true});
    }
    if (document.readyState === 'loading') { document.addEventListener('DOMContentLoaded', start); } else { start(); }
})();
